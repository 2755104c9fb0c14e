"""Golden run: one small config with every dial and every output format, its output bytes pinned.

The reorganization of the package (issue 14) must keep behaviour and every output byte the
same; this test is the net under it.  Image and annotation bytes depend on the numeric
libraries (resampling, anti-aliasing, PNG/JPEG encoders, GEOS), so the pins hold only for the
library versions that made them: with other versions the test is skipped, saying which differ.
To re-pin after an intended change of output, run ``python tests/test_golden.py`` and paste
what it prints.
"""

from __future__ import annotations

import hashlib
import json
from importlib.metadata import version
from pathlib import Path

import pytest

from synthgen.config import load_config
from synthgen.evaluate.cocoeval import score_files
from synthgen.jitter import DetectorSpec
from synthgen.jitter.coco import jitter_files
from synthgen.run.make import make_dataset

CONFIG = Path(__file__).with_name("golden.toml")
FORMATS = ("coco", "voc", "yolo", "tokens", "masks")
SPLIT = {"train": 0.5, "val": 0.25, "test": 0.25}
BY = ("size", "area", "visible_fraction", "max_iou", "neighbours", "contrast", "rotation", "kind")

#: The versions the pins below were made with (distribution name -> version).
PINNED_VERSIONS = {
    "numpy": "2.4.6",
    "opencv-python-headless": "5.0.0.93",
    "pillow": "13.0.0",
    "scikit-image": "0.26.0",
    "shapely": "2.2.0",
}

#: sha256 of every file the run writes, by path relative to the dataset directory (manifest
#: included), and of the jitter outputs and the score summary.
PINNED: dict[str, str] = {
    'annotations.json': 'a4ff82d213640ef0a91c73b1adc13e370976ad0cdc191fa222bbed44b005da0e',
    'annotations.test.json': '8930d2c78d2eeb138c2e118b8b0ae40772d339899181fe7a8ea38788464dccb2',
    'annotations.train.json': 'edcf0111956001afb8b2ece3622b597142e566a70a910f3e72e3f40c099ddc66',
    'annotations.val.json': 'caa13e2012fbfec0bcac450336b46be80ec08317b5603b63ceba26f598fba065',
    'images/000000.png': '952f9b9085b2eac126604d69c1668ec62b2020966cdd3cb98975b7bd4ef4cced',
    'images/000001.png': '7916eb3e8f52a9a766b214fca0b88d62071e7e6a096044c530337f6cb9b05424',
    'images/000002.png': '31e460688e0004046acc84dfffff0c93a2ad6b4aae570b746a7668a86dab24a0',
    'images/000003.png': 'c1d613142f5644b8b18a8874e54d524ba84c42f0ccaf1178b3eff8bf197ec070',
    'images/000004.png': '8e7e13cb9199f25b1cfc5f348aeb6e84ec790b89636d8e938bcaed52139c252f',
    'images/000005.png': '079f10edfce447586524363a64c8c8f0247399fd8e98ab570a0a9161ba201377',
    'manifest.json': '528e70e492ca3519314c0707a312b109ee0555d9d6d0320ae119b126ee1f21df',
    'masks/000000.png': 'fc79ee4efd9257973af018e2206921a3ecab84350893e3360f74feea0b3005da',
    'masks/000001.png': 'aac99cc0c221fcbc2e9fb2d85b874fecd14414da04c0fd473b6410daae8f0e0f',
    'masks/000002.png': 'b1ed3bf91b4d7e9f2c53e311628d51486ca9610df65f4cea947c2a7dd1399ac2',
    'masks/000003.png': 'ad831d764e843100453bc5bf8cf932cf3306f85a55e7fad1632ced903f1e4c30',
    'masks/000004.png': 'ba9a4f7766308522da08fbe2187a3a862ad49a1d7f6dd8a50f6c078cf7a78908',
    'masks/000005.png': '695aaacb649d573972eb3c78c1a7c49b6e0eec10505220bade18ffddb86641f7',
    'splits.json': '57ea5d3b53f61faef9cfdcf912bcb8981adee7a17d528a80d9d8b39a4c85b706',
    'tokens.jsonl': '6305d55daa4c3ece22fec436eea3f23dd1152c266987a94876cebf673aae6970',
    'tokens.test.jsonl': '1c3ed744b2cf0c79af40d8a5cf1e4a17dd3b2eb2608b9e1d80e1c89eb4d0e502',
    'tokens.train.jsonl': '2eb0386e4af6331c508b3049b76d1ab2e38f133a59763db4b4ef95bc83e4a7eb',
    'tokens.val.jsonl': '9b0ec2204bad04b65484fbd4ab9bf4ee01f5bfbed32cadd53ac2de9a85bfa86b',
    'tokens.vocab.json': 'fcd76cabe6bd4289718a601bf7796e60f5d1553193b68d5c8801d60d42e7efdd',
    'voc/000000.xml': '9791c569e25d259a14c4d21e53eaf6c4e93508d55c7e68219a66b2c6d5521691',
    'voc/000001.xml': 'fa5056dfb43c8d11d0e0aa339aef7672a2a85a889f2c5cc8a5036fa83ad60b62',
    'voc/000002.xml': '5ad9f63b5964683d21d3caa7afe0fd826e6bf88ed383ec3324757addb47bac3f',
    'voc/000003.xml': '1926a5bce5166816e80c2a928987a65f7fec7e7c343d8bc5a71fa85b161641ae',
    'voc/000004.xml': '957843ba1813e65362d2f4db3a8e67cecdf153697954c8a283d8dd3d907ebbce',
    'voc/000005.xml': 'ab9a9296fc99ec47556b9daf307f36c0d081772e0ed4348484298c21454e3cc5',
    'voc/ImageSets/Main/test.txt': '2f901bcafc0341672d6bb8861391562829b8873341d5af8192c68c136723b3f7',
    'voc/ImageSets/Main/train.txt': 'd33c6a9be315baedae64c4dee7bbb67409508ee965a26e01ba40a4215d83debb',
    'voc/ImageSets/Main/val.txt': '949851358a3573e970f5c81647cb5734d4c91bd21485a1d16fd68b94812ab138',
    'yolo/000000.txt': 'e07136231bd0986f8e99ca8a0a9bc3bfaed472e15356a02d5e105a21890e0889',
    'yolo/000001.txt': 'd12f25df72d2e7c751c790721a6f804c23ee607a413a87a35ad38b708647875c',
    'yolo/000002.txt': '1455e3ac341228c9c39e333429d282bcce8e2553a6e58cf7a2e23bc5c06f60d6',
    'yolo/000003.txt': '42e2a5d5cf95dd08e1ae4dd6fb2e3845219bb7b53e5e212ba6787f44901246f1',
    'yolo/000004.txt': 'e4beb110367f843cba2a0afcb4e5ebc552dcbfaaa29169b8754c31f7cd92f7d4',
    'yolo/000005.txt': 'c5ad8ea7f2c80d89d2c7156dd152806d4a6415f4637e5a060a95b8122446c68c',
    'yolo/labels.txt': '6fb5c55c098f308e17631da44cf066f61c4365e3ec83f291aa5d167886cffc59',
    'yolo/splits/test.txt': 'd4be35da8a6ef14be9d543f9f876bd37039d2bc506fd20035a3a048dc59ce0c4',
    'yolo/splits/train.txt': 'e3edf66ec3430fea453ba1e9f959d64e79208005664a97fbc88dd6ade90c0d4a',
    'yolo/splits/val.txt': 'dcce19e5109246616f2c785e35903124d9136eab8c4a2f5c7d1ec8cddfac85cb',
    '../pred.json': '475d7f2644a7dd2a401729a882a2404c36edc538723d80434ec70f042c3d5cf7',
    '../pred.truth.json': '92311ded23b01e2c53de239d672a9b9b5634799248c579deb0434a26ca386b59',
    '<score>': '4760496267302c894051e24b48241f1b903a1b4100efca424b73684e0a128e13',
}


def _differing_versions() -> list[str]:
    out = []
    for name, want in PINNED_VERSIONS.items():
        try:
            have = version(name)
        except Exception:  # noqa: BLE001 - an absent distribution is one more difference
            have = "absent"
        if have != want:
            out.append(f"{name} {have} (pinned {want})")
    return out


def golden_digests(tmp: Path) -> dict[str, str]:
    """Run make, jitter and score on the golden config under ``tmp``; sha256 of every output."""
    data = tmp / "data"
    make_dataset(load_config(CONFIG), data, workers=1, formats=FORMATS, split=SPLIT)
    spec = DetectorSpec()
    pred = tmp / "pred.json"
    jitter_files(data, pred, seed=5, spec=spec)
    evaluation, slices = score_files(data, pred, by=BY)
    digests = {
        p.relative_to(data).as_posix(): hashlib.sha256(p.read_bytes()).hexdigest()
        for p in sorted(data.rglob("*"))
        if p.is_file()
    }
    for p in sorted(tmp.glob("pred*")):
        digests[f"../{p.name}"] = hashlib.sha256(p.read_bytes()).hexdigest()
    summary = json.dumps(evaluation.to_dict(slices), sort_keys=True, default=repr).encode()
    digests["<score>"] = hashlib.sha256(summary).hexdigest()
    return digests


def test_golden_run_outputs_are_byte_identical(tmp_path):
    """Every file of the golden run (dataset, all formats, splits, jitter outputs, score) keeps its bytes."""
    differing = _differing_versions()
    if differing:
        pytest.skip("golden digests were made with other library versions: " + ", ".join(differing))
    digests = golden_digests(tmp_path)
    coco = json.loads((tmp_path / "data" / "annotations.json").read_bytes())
    facts = [a["synthgen"] for a in coco["annotations"]]
    # the run really turns the dials on: ignore regions, hidden parts, every kind
    assert any(a["iscrowd"] == 1 for a in coco["annotations"])
    assert any(f["visible_fraction"] < 0.5 for f in facts)
    assert {f["kind"] for f in facts} == {c["name"] for c in coco["categories"]}
    changed = sorted(k for k in digests.keys() | PINNED.keys() if digests.get(k) != PINNED.get(k))
    assert changed == []


if __name__ == "__main__":  # re-pin: print the digests of this machine's run
    import tempfile

    with tempfile.TemporaryDirectory() as d:
        for k, v in golden_digests(Path(d)).items():
            print(f"    {k!r}: {v!r},")
