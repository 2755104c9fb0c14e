"""Each convention has one home: the modules that use a shared constant take it from there."""

from __future__ import annotations

import ast
from pathlib import Path

from synthgen import jitter, report, scene, score
from synthgen.formats import coco

PACKAGE = Path(__file__).resolve().parent.parent / "synthgen"


def test_coco_area_ranges_live_in_formats_coco():
    """COCO's small/medium/large area ranges (32^2 and 96^2 px^2, COCO detection evaluation) are stated once."""
    assert score.AREA_RANGES is coco.AREA_RANGES
    assert report.COCO_AREA_RANGES == coco.AREA_RANGES[1:]
    assert dict((n, (lo, hi)) for n, lo, hi in coco.AREA_RANGES)["medium"] == (32**2, 96**2)


def test_prediction_kinds_extend_the_detection_kinds():
    """report's prediction kinds are jitter's detection kinds plus 'ignored'."""
    assert report.PREDICTION_KINDS == (*jitter.DETECTION_KINDS, "ignored")


def test_luma_weights_are_written_once():
    """The Rec. 601 luma weights (common practice) appear as literals in one place only."""
    hits = []
    for path in PACKAGE.rglob("*.py"):
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            if isinstance(node, ast.Constant) and node.value in (0.299, 0.587, 0.114):
                hits.append(f"{path.name}:{node.lineno}")
    assert len(hits) == 3, hits
    assert scene.LUMA.tolist() == [0.299, 0.587, 0.114]
