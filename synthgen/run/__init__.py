"""Running the pipeline over many images: render in workers, journal, write the dataset directory.

The unit of work is one image (:mod:`.render`: scene -> encoded file + records); :mod:`.backends`
runs blocks of them in local worker processes (:mod:`.pool`) or on a Dask cluster behind one
interface; :mod:`.journal` records each finished image so a run can resume, and holds the shard
bookkeeping; :mod:`.outdir` holds the output directory's rules (refusal, ``--overwrite``);
:mod:`.finish` writes the annotations, formats and manifest; :mod:`.make` runs a dataset,
:mod:`.merge` assembles shards, :mod:`.sweep` makes one dataset per varied value.

The entry points are importable from here (loaded on first use, so a worker process that
imports :mod:`.pool` does not load the rest)::

    from synthgen.run import make_dataset, merge_shards, run_sweep
"""

from synthgen._lazy import lazy_exports

#: public name -> module that defines it
_EXPORTS = {
    "make_dataset": "synthgen.run.make",
    "MakeSummary": "synthgen.run.finish",
    "merge_shards": "synthgen.run.merge",
    "run_sweep": "synthgen.run.sweep",
    "Shard": "synthgen.run.journal",
    "parse_shard": "synthgen.run.journal",
}

__all__ = list(_EXPORTS)


__getattr__, __dir__ = lazy_exports(__name__, _EXPORTS)
