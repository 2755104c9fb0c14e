"""COCO RLE against the reference implementation (pycocotools.mask)."""

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays
from pycocotools import mask as cocomask

from synthgen.formats import rle


def _reference(mask: np.ndarray) -> dict:
    # REFERENCE.md: COCO JSON -- pycocotools wants Fortran-ordered uint8 and returns bytes counts.
    return cocomask.encode(np.asfortranarray(mask.astype(np.uint8)))


def _masks():
    rng = np.random.default_rng(5)
    out = [np.zeros((7, 5), bool), np.ones((7, 5), bool), np.ones((1, 1), bool), np.zeros((1, 1), bool)]
    for _ in range(60):
        h, w = rng.integers(1, 48, 2)
        out.append(rng.random((h, w)) < rng.random())
    edge = np.zeros((9, 11), bool)
    edge[0, :] = True  # top edge
    edge[:, -1] = True  # right edge
    edge[-1, 3] = True  # bottom-edge pixel
    out.append(edge)
    return out


@pytest.mark.parametrize("mask", _masks())
def test_encode_matches_pycocotools(mask):
    """encode() writes the same size and counts string as pycocotools.mask.encode."""
    ref = _reference(mask)
    mine = rle.encode(mask)
    # REFERENCE.md: COCO JSON (RLE layout, counts as str once decoded from bytes)
    assert mine["size"] == list(ref["size"])
    assert mine["counts"] == ref["counts"].decode("ascii")


@pytest.mark.parametrize("mask", _masks())
def test_decode_of_pycocotools_rle_is_the_mask(mask):
    """decode() of pycocotools' RLE gives back the mask exactly."""
    ref = _reference(mask)
    assert np.array_equal(rle.decode(ref), mask)
    # and pycocotools decodes ours to the same mask (REFERENCE.md: COCO JSON)
    assert np.array_equal(cocomask.decode(rle.encode(mask)).astype(bool), mask)


@pytest.mark.parametrize("mask", _masks())
def test_area_matches_pycocotools(mask):
    """area() equals pycocotools.mask.area and the number of set pixels."""
    mine = rle.encode(mask)
    assert rle.area(mine) == int(cocomask.area(_reference(mask)))  # REFERENCE.md: COCO JSON
    assert rle.area(mine) == int(mask.sum())


def test_large_counts_and_negative_deltas_match_pycocotools():
    """Runs longer than 2**15 and shrinking runs (negative deltas) encode as pycocotools does."""
    m = np.zeros((1200, 900), bool)
    m[3:1190, 10:880] = True
    m[600, 400] = False
    m[:, 890] = True
    ref = _reference(m)
    assert rle.encode(m)["counts"] == ref["counts"].decode("ascii")  # REFERENCE.md: COCO JSON


def test_decode_accepts_uncompressed_counts():
    """decode() reads uncompressed RLE (counts as a list of ints)."""
    m = np.zeros((3, 2), bool)
    m[1:, 0] = True
    # column-major, zero run first (REFERENCE.md: COCO JSON): 1 zero, 2 ones, 3 zeros
    assert np.array_equal(rle.decode({"size": [3, 2], "counts": [1, 2, 3]}), m)


def test_decode_rejects_counts_of_the_wrong_total():
    """decode() refuses runs that do not fill H * W."""
    with pytest.raises(ValueError, match="H \\* W"):
        rle.decode({"size": [3, 2], "counts": [1, 2]})


@settings(max_examples=150, deadline=None)
@given(
    patch=arrays(bool, st.tuples(st.integers(1, 12), st.integers(1, 12))),
    row0=st.integers(-14, 20),
    col0=st.integers(-14, 20),
    height=st.integers(1, 20),
    width=st.integers(1, 20),
)
def test_encode_patch_equals_encode_of_the_full_mask(patch, row0, col0, height, width):
    """encode_patch() equals encode() of the canvas with the patch pasted in (cropped at the border)."""
    full = np.zeros((height, width), bool)
    r_lo, c_lo = max(row0, 0), max(col0, 0)
    r_hi, c_hi = min(row0 + patch.shape[0], height), min(col0 + patch.shape[1], width)
    if r_hi > r_lo and c_hi > c_lo:
        full[r_lo:r_hi, c_lo:c_hi] = patch[r_lo - row0 : r_hi - row0, c_lo - col0 : c_hi - col0]
    got = rle.encode_patch(patch, row0, col0, height, width)
    assert got == rle.encode(full)
    assert got["counts"] == _reference(full)["counts"].decode("ascii")  # REFERENCE.md: COCO JSON


def test_encode_patch_full_height_columns_merge_into_one_run():
    """A patch spanning whole columns gives one run, as pycocotools does for the full mask."""
    full = np.zeros((6, 8), bool)
    full[:, 2:5] = True
    got = rle.encode_patch(np.ones((6, 3), bool), 0, 2, 6, 8)
    assert got["counts"] == _reference(full)["counts"].decode("ascii")  # REFERENCE.md: COCO JSON
    assert rle.string_to_counts(got["counts"]).tolist() == [12, 18, 18]


def test_counts_string_round_trip():
    """string_to_counts inverts counts_to_string, including long and shrinking runs."""
    counts = [0, 5, 1_000_000, 3, 2, 70_000, 1, 1]
    assert rle.string_to_counts(rle.counts_to_string(counts)).tolist() == counts


def test_loop_and_vectorized_string_paths_agree(monkeypatch):
    """The short-input loop and the array path build the same counts string."""
    rng = np.random.default_rng(9)
    counts = rng.integers(0, 5000, 300).tolist()
    loop = rle.counts_to_string(counts) if len(counts) <= rle._SMALL else rle._counts_to_string_small(counts)
    monkeypatch.setattr(rle, "_SMALL", 0)
    assert rle.counts_to_string(counts) == loop
    assert rle.string_to_counts(loop).tolist() == counts


@pytest.mark.parametrize("mask", _masks()[:20])
def test_flat_indices_are_the_column_major_set_pixels(mask):
    """flat_indices() lists the set pixels in column-major order (the order RLE runs follow)."""
    # REFERENCE.md: COCO JSON -- RLE counts are column-major
    assert rle.flat_indices(rle.encode(mask)).tolist() == np.flatnonzero(mask.ravel(order="F")).tolist()
