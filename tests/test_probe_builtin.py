"""The reference detector degrades the way the physics says: size, visibility, noise and contrast.

The margins are generous on purpose: these are orderings on small fixed datasets, measured with the one
scorer (synthgen.evaluate, itself held to pycocotools), not timings.  That smaller, fainter, noisier and
more hidden objects are harder to find is common practice in detection benchmarking; the numbers
beside each check are what the current detector measured, for the reader.
"""

from __future__ import annotations

import json
import pickle

import numpy as np
import pytest

from synthgen.config import KINDS, load_config
from synthgen.probe import parse_detector, run_probe
from synthgen.probe.builtin import BuiltinDetector, BuiltinSettings, describe, fit_prototypes
from synthgen.run import make_dataset

BASE = ["count=8", "seed=3", "canvas.width=320", "canvas.height=240", 'background.kind="solid"',
        "objects.min_contrast=0.3", 'objects.layout="separated"']


@pytest.fixture(scope="module")
def probed(tmp_path_factory):
    """probed(name, overrides, by) -> score.json's entry of a fresh dataset probed with the builtin."""
    root = tmp_path_factory.mktemp("builtin")

    def probe(name, overrides, by=("size",)):
        make_dataset(load_config(None, BASE + list(overrides)), root / name, workers=1)
        run_probe(root / name, parse_detector("builtin"), root / f"{name}-probe", by=list(by))
        return json.loads((root / f"{name}-probe" / "score.json").read_text())["subsets"][name]

    return probe


def test_large_clear_objects_are_found(probed):
    """Large (32-128 px), high-contrast, whole objects on a solid background: AP50 >= 0.9 (measured 0.98)."""
    score = probed("large", ["objects.size=[32,128]", "objects.count=[3,6]", "objects.min_visible=1.0"])
    assert score["stats"]["AP50"] >= 0.9


def test_tiny_objects_score_far_below_small_ones(probed):
    """AP50 on 1-4 px objects is at least 0.3 below AP50 on 16-32 px ones (measured 0.07 and 0.91)."""
    tiny = probed("tiny", ["objects.size=[1,4]", "objects.count=[30,50]", "render.samples=8", "objects.min_area=0.25"])
    small = probed("small", ["objects.size=[16,32]", "objects.count=[8,12]"])
    assert small["stats"]["AP50"] - tiny["stats"]["AP50"] >= 0.3


def test_recall_falls_as_visibility_falls(probed):
    """Recall at IoU 0.5 of mostly hidden objects is below that of whole ones (measured 0.0 and 0.23)."""
    score = probed("hidden", ["objects.size=[20,60]", "objects.count=[4,8]", 'objects.layout="scatter"',
                              "objects.occlusion=[0.0,0.8]", "objects.min_visible=0.1"],
                   by=["visible_fraction:0,0.5,0.9,1"])
    bins = score["slices"]["visible_fraction"]
    assert bins[0]["n_gt"] >= 5 and bins[-1]["n_gt"] >= 20
    assert bins[-1]["recall50"] - bins[0]["recall50"] >= 0.1


def test_ap_falls_as_noise_rises(probed):
    """AP50 at noise sigma 0, 20 and 60 grey levels falls step by step (measured 0.93, 0.62, 0.26)."""
    aps = []
    for sigma in (0, 20, 60):
        noise = [f"degrade.noise.p={1.0 if sigma else 0.0}", f"degrade.noise.sigma=[{max(sigma, 1)},{max(sigma, 1)}]"]
        aps.append(probed(f"noise{sigma}", ["objects.size=[8,40]", "objects.count=[6,10]",
                                            "objects.min_contrast=0.15", *noise])["stats"]["AP50"])
    assert aps[0] - aps[1] >= 0.1 and aps[1] - aps[2] >= 0.1, aps


def test_ap_falls_as_contrast_falls(probed):
    """On a noisy image (sigma 8), faint objects (contrast < 0.1) score AP50 below the others (measured 0.36, 0.62)."""
    score = probed("faint", ["objects.size=[8,40]", "objects.count=[6,10]", "objects.min_contrast=0.03",
                             "degrade.noise.p=1.0", "degrade.noise.sigma=[8,8]"], by=["contrast:0,0.1,1"])
    faint, clear = score["slices"]["contrast"]
    assert faint["n_gt"] >= 10 and clear["n_gt"] >= 20
    assert clear["ap50"] - faint["ap50"] >= 0.1


def test_fit_is_deterministic_and_the_detector_pickles():
    """Two fits give the same centroids; a pickled, fitted detector detects the same boxes."""
    a, b = fit_prototypes.__wrapped__(BuiltinSettings()), fit_prototypes.__wrapped__(BuiltinSettings())
    np.testing.assert_array_equal(a.means, b.means)
    det = BuiltinDetector().prepare(KINDS)
    image = np.full((60, 80, 3), 200, np.uint8)
    image[10:30, 20:50] = (20, 40, 160)
    out, again = det([image])[0], pickle.loads(pickle.dumps(det))([image])[0]
    np.testing.assert_array_equal(out["boxes"], again["boxes"])
    # a 30x20 block: its box is the block's (COCO/ARCHITECTURE convention: half-open pixel edges)
    np.testing.assert_allclose(out["boxes"][0], [20, 10, 50, 30])
    assert out["labels"][0] == "rectangle"


def test_prepare_keeps_only_the_dataset_kinds():
    """Labels come only from the kinds the dataset lists."""
    det = BuiltinDetector().prepare(["ellipse"])
    image = np.full((60, 80, 3), 200, np.uint8)
    image[10:30, 20:50] = (20, 40, 160)
    assert set(det([image])[0]["labels"]) == {"ellipse"}


def test_descriptors_of_a_disc_and_a_square():
    """A digitized disc is near-convex and fills ~pi/4 of its rectangle; a square fills ~2/pi of its circle
    (analytic geometry: pi r^2 / (2r)^2 and s^2 / (pi s^2 / 2))."""
    yy, xx = np.mgrid[0:81, 0:81]
    disc = (((xx - 40) ** 2 + (yy - 40) ** 2) <= 40 ** 2).astype(np.uint8)
    d = describe(disc)
    assert d[0] > 0.97 and abs(d[3] - np.pi / 4) < 0.03
    s = describe(np.ones((40, 40), np.uint8))
    assert abs(s[2] - 2 / np.pi) < 0.03 and s[3] > 0.99
