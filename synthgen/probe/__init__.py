"""A real detector in the loop: run it over a dataset or a sweep, keep its predictions, score them.

``synthgen probe SOURCE --detector SPEC --out DIR`` calls :func:`run_probe`.
SOURCE is a dataset directory, a sweep directory (with ``sweep.json``) or a
TOML config, made first into ``DIR/data/`` (a sweep there with ``--vary``, else
one dataset at ``DIR/data/<config stem>``).  SPEC is parsed by
:func:`synthgen.probe.specs.parse_detector`; what a detector must return is in
:mod:`synthgen.probe.contract`; the reference detector is
:class:`synthgen.probe.builtin.BuiltinDetector`.

What DIR holds (a contract: the HTML report reads it)
-----------------------------------------------------
``DIR/probe.json``, written last (a directory without it is an unfinished probe)::

    {"synthgen_version": str, "created": ISO-8601 UTC,
     "detector": {"spec": str, "name": str, "settings": {...}},
     "source": {"path": str, "kind": "dataset" | "sweep", "manifest_digest": str, "config": str | null},
     "subsets": [{"name": str, "dataset": str, "predictions": "predictions/<name>.json",
                  "varied": {key: value} | null}, ...],
     "by": [fact, ...], "images": int, "seconds": float}

  ``dataset`` and ``source.path`` are relative to DIR when they lie inside it.
  ``manifest_digest`` is the sha256 of the dataset's ``manifest.json`` (of its
  ``annotations.json`` when it has none); for a sweep, the sha256 of the text
  made of one line ``<subset>\\t<that digest>\\n`` per subset in ``sweep.json``'s
  order.
``DIR/predictions/<name>.json``
    COCO results arrays, one per subset.  A sweep's subset names are its
    points' relative paths (``objects.size=[1,2]``), so ``DIR/predictions`` is
    a valid ``synthgen score --pred-dir``; one dataset is one subset named
    after its directory.  Records are in image order, each image's in the
    detector's order; the bytes do not depend on ``--workers``, ``--batch``
    or ``--resume``.
``DIR/score.json``
    ``{"subsets": {name: Evaluation.to_dict(slices)}}`` as ``synthgen score
    --json`` writes it for one dataset, plus ``"sweep": [SweepPoint.to_dict(),
    ...]`` (as ``score --pred-dir --json``) for a sweep.  Scored by
    :mod:`synthgen.evaluate`, sliced by every ``--by`` fact (default
    :data:`~synthgen.probe.run.DEFAULT_BY`, less facts the data lacks).
``DIR/figures/``
    When matplotlib is installed: ``<name>.png`` per subset (recall and AP per
    bin, as ``score --plot``) and, for a sweep, ``sweep.png`` (AP and AR
    across the sweep).
``DIR/report.html``
    The HTML report of the run (:func:`synthgen.page.write_report`), written
    after ``probe.json`` when asked (``synthgen probe`` does unless
    ``--no-report``) and matplotlib is installed.
``DIR/data/``
    The datasets made from a config source.
``DIR/.probe/``
    While running: ``run.json`` (detector, source and slices asked for) and
    ``journal.jsonl`` (one line per finished image), which ``--resume`` reads.
"""

from synthgen.probe.contract import DetectorOutputError
from synthgen.probe.run import DEFAULT_BY, ProbeSummary, run_probe
from synthgen.probe.specs import parse_detector

__all__ = ["run_probe", "parse_detector", "ProbeSummary", "DetectorOutputError", "DEFAULT_BY"]
