"""Probe-shaped run directories for the report tests, built from a small dataset and simulated detections.

The layout is the one ``synthgen probe`` writes: ``probe.json``, ``predictions/<subset>.json`` and
``score.json`` (every subset's ``Evaluation.to_dict(slices)``, as ``synthgen score --json`` writes it).
"""

from __future__ import annotations

import shutil
from pathlib import Path

import orjson

from synthgen.evaluate import SweepPoint, score_files
from synthgen.jitter import DetectorSpec
from synthgen.jitter.coco import jitter_files

BY = ("size", "visible_fraction", "kind", "truncated")
SPEC = DetectorSpec(miss=0.15, duplicates=0.1, background=1.0, relabel=0.05, localization=0.1)


def make_probe_dir(root: Path, dataset: Path, *, subsets=(("all", None, 5),)) -> Path:
    """A probe output directory under ``root`` with one subset per (name, varied, jitter seed)."""
    run = root / "probe-run"
    run.mkdir(parents=True)
    (run / "predictions").mkdir()
    meta_subsets, scores, sweep = [], {}, []
    for name, varied, seed in subsets:
        data = run / "data" / name
        shutil.copytree(dataset, data)
        pred = run / "predictions" / f"{name}.json"
        jitter_files(data, pred, truth=root / f"{name}.truth.json", seed=seed, spec=SPEC)
        ev, slices = score_files(data, pred, BY)
        scores[name] = ev.to_dict(slices)
        if varied is not None:
            sweep.append(SweepPoint(name, varied, ev, slices).to_dict())
        meta_subsets.append({"name": name, "dataset": f"data/{name}", "predictions": f"predictions/{name}.json",
                             "varied": varied})
    meta = {
        "synthgen_version": "0.1.0",
        "created": "2026-12-01T10:00:00Z",
        "detector": {"spec": "jitter", "name": "simulated detector", "settings": {"miss": 0.15}},
        "source": {"path": str(dataset), "kind": "sweep" if sweep else "dataset",
                   "manifest_digest": "0" * 64, "config": {"seed": 11, "count": 6}},
        "subsets": meta_subsets,
        "by": list(BY),
        "images": 6 * len(meta_subsets),
        "seconds": 1.5,
    }
    (run / "probe.json").write_bytes(orjson.dumps(meta))
    (run / "score.json").write_bytes(orjson.dumps({"subsets": scores, **({"sweep": sweep} if sweep else {})}))
    return run
