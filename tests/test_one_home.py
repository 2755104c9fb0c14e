"""Each convention has one home: the modules that use a shared constant take it from there."""

from __future__ import annotations

import ast
from pathlib import Path

from synthgen import jitter, report, scene
from synthgen.evaluate import cocoeval as score
from synthgen.formats import coco

PACKAGE = Path(__file__).resolve().parent.parent / "synthgen"


def test_coco_area_ranges_live_in_formats_coco():
    """COCO's small/medium/large area ranges (32^2 and 96^2 px^2, COCO detection evaluation) are stated once."""
    assert score.AREA_RANGES is coco.AREA_RANGES
    assert report.COCO_AREA_RANGES == coco.AREA_RANGES[1:]
    assert dict((n, (lo, hi)) for n, lo, hi in coco.AREA_RANGES)["medium"] == (32**2, 96**2)


def test_prediction_kinds_extend_the_detection_kinds():
    """The prediction kinds (formats/results) are jitter's detection kinds plus 'ignored'; one reader of results."""
    from synthgen.formats import results

    assert report.PREDICTION_KINDS is results.PREDICTION_KINDS
    assert jitter.DETECTION_KINDS is results.DETECTION_KINDS
    assert results.PREDICTION_KINDS == (*results.DETECTION_KINDS, "ignored")
    assert score.read_predictions is results.read_predictions
    assert report.read_truth_sidecar is results.read_truth_sidecar


def test_luma_weights_are_written_once():
    """The Rec. 601 luma weights (common practice) appear as literals in one place only."""
    hits = []
    for path in PACKAGE.rglob("*.py"):
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            if isinstance(node, ast.Constant) and node.value in (0.299, 0.587, 0.114):
                hits.append(f"{path.name}:{node.lineno}")
    assert len(hits) == 3, hits
    assert scene.LUMA.tolist() == [0.299, 0.587, 0.114]


def test_dataset_file_names_are_written_once():
    """No module but formats/dataset_dir spells a dataset file's name, or a folder's in a path, as a string literal."""
    from synthgen.formats import dataset_dir

    names = {dataset_dir.ANNOTATIONS, dataset_dir.MANIFEST, dataset_dir.SPLITS, dataset_dir.TOKENS}
    names |= {dataset_dir.TOKENS_VOCAB, dataset_dir.MASKS_RLE, dataset_dir.STATE_DIR}
    folders = {dataset_dir.IMAGES_DIR, dataset_dir.VOC_DIR, dataset_dir.YOLO_DIR, dataset_dir.MASKS_DIR}
    hits = []
    for path in PACKAGE.rglob("*.py"):
        if path.name == "dataset_dir.py":
            continue
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            if isinstance(node, ast.Constant) and node.value in names:
                hits.append(f"{path.relative_to(PACKAGE.parent)}:{node.lineno}: {node.value!r}")
            # folder names are also COCO keys ("images") or words, so only a path made with them counts
            if (isinstance(node, ast.BinOp) and isinstance(node.op, ast.Div) and isinstance(node.right, ast.Constant)
                    and node.right.value in folders):
                hits.append(f"{path.relative_to(PACKAGE.parent)}:{node.lineno}: / {node.right.value!r}")
    assert hits == []
