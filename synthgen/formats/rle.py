"""COCO run-length encoding (RLE) of binary masks.

Rule
----
A mask of shape ``(H, W)`` is read in column-major order (down the first
column, then the next, ...), cut into runs of equal values, and stored as the
run lengths, beginning with a run of zeros (of length 0 when the first pixel is
set).  The last run is never followed by an empty run.  A COCO RLE is the dict
``{"size": [H, W], "counts": str}``, where ``counts`` is the compressed string
that COCO JSON files carry:

* each count from the fourth on is replaced by its difference from the count
  two places earlier (counts 0, 1 and 2 are stored as they are);
* every value is cut into 5-bit groups, least significant first; a character
  is ``48 + group``, with bit ``0x20`` set when more groups follow; a value is
  complete when the remaining bits are all copies of the group's sign bit
  ``0x10`` (two's complement).

This is the layout the COCO reference tools read and write; ``decode`` also
accepts uncompressed RLE (``counts`` as a list of ints) and ``bytes`` counts.

All functions are vectorized with numpy; :func:`encode_patch` builds the RLE of
a whole canvas from the small patch that holds an object without making an
``(H, W)`` array, so its cost grows with the patch, not the canvas.
"""

from __future__ import annotations

import numpy as np

__all__ = ["encode", "encode_patch", "decode", "area", "flat_indices", "counts_to_string", "string_to_counts"]

# Longest value: 7 groups of 5 bits hold any run on a canvas of up to 2**34 px.
_MAX_GROUPS = 7
# Below this many counts the string is built by a plain loop (faster there).
_SMALL = 128


def counts_to_string(counts) -> str:
    """Compress run lengths into the COCO counts string.

    Parameters
    ----------
    counts : array_like of int, shape (M,)
        Run lengths, starting with a run of zeros.

    Returns
    -------
    str
        ASCII string, one or more characters per count.

    Examples
    --------
    >>> counts_to_string([2, 3, 4])
    '234'
    >>> string_to_counts(counts_to_string([100, 7, 93])).tolist()
    [100, 7, 93]
    """
    cnts = np.asarray(counts, dtype=np.int64).ravel()
    m = cnts.size
    if m == 0:
        return ""
    if m <= _SMALL:
        return _counts_to_string_small(cnts.tolist())
    x = cnts.copy()
    if m > 3:
        x[3:] -= cnts[1:-2]  # delta against the count two places earlier
    # Groups per value: the fewest 5-bit groups holding it as a signed number.
    mag = np.where(x < 0, ~x, x)  # bits needed, less the sign bit
    if mag.max() >= 1 << (5 * _MAX_GROUPS - 1):
        raise ValueError("RLE count too large to encode")
    bits = np.frexp(mag.astype(np.float64))[1] + 1  # bit length + sign bit (exact below 2**53)
    groups = (bits + 4) // 5
    first = np.cumsum(groups) - groups  # (m,) output position of each value's first group
    total = int(groups.sum())
    j = np.arange(total, dtype=np.int64) - np.repeat(first, groups)  # group index within its value
    v = np.repeat(x, groups)
    c = (v >> (5 * j)) & 0x1F  # arithmetic shift keeps the sign of negative deltas
    c |= (j < np.repeat(groups, groups) - 1).astype(np.int64) << 5  # continuation bit
    return (c + 48).astype(np.uint8).tobytes().decode("ascii")


def _counts_to_string_small(cnts: list[int]) -> str:
    # Same rule as the vectorized path; for a few dozen counts a plain loop
    # costs less than the fixed overhead of the array operations.
    out = bytearray()
    for i, x in enumerate(cnts):
        if i > 2:
            x -= cnts[i - 2]
        while True:
            c = x & 0x1F
            x >>= 5
            more = x != -1 if c & 0x10 else x != 0
            out.append((c | 0x20 if more else c) + 48)
            if not more:
                break
    return out.decode("ascii")


def string_to_counts(s: str | bytes) -> np.ndarray:
    """Expand a COCO counts string into run lengths.

    Parameters
    ----------
    s : str or bytes
        Compressed counts (see the module docstring).

    Returns
    -------
    ndarray of int64, shape (M,)
    """
    raw = s.encode("ascii") if isinstance(s, str) else bytes(s)
    c = np.frombuffer(raw, dtype=np.uint8).astype(np.int64) - 48
    if c.size == 0:
        return np.zeros(0, dtype=np.int64)
    if (c < 0).any() or (c > 63).any():
        raise ValueError("RLE counts string has characters outside '0'..'o'")
    last = (c & 0x20) == 0  # the final group of each value
    if not last[-1]:
        raise ValueError("RLE counts string ends inside a value")
    ends = np.flatnonzero(last)
    starts = np.concatenate(([0], ends[:-1] + 1))
    group = np.repeat(np.arange(ends.size), ends - starts + 1)
    k = np.arange(c.size) - starts[group]  # position of each group within its value
    if k.max() > 11:  # 12 groups = 60 bits, the most an int64 holds here
        raise ValueError("RLE counts string has a value too long to decode")
    x = np.zeros(ends.size, dtype=np.int64)
    np.add.at(x, group, (c & 0x1F) << (5 * k))
    negative = (c[ends] & 0x10) != 0
    nbits = 5 * (ends - starts + 1)
    x[negative] |= -(np.int64(1) << nbits[negative])
    # Undo the delta: counts i > 2 were stored minus count i - 2.
    cnts = x.copy()
    if cnts.size > 3:
        cnts[2::2] = np.cumsum(x[2::2])
        cnts[1::2] = np.cumsum(x[1::2])
    return cnts


def _runs_of_flat(flat: np.ndarray) -> np.ndarray:
    """Run lengths of a 1-D bool array, starting with a run of zeros."""
    n = flat.size
    change = np.flatnonzero(flat[1:] != flat[:-1]) + 1
    bounds = np.concatenate(([0], change, [n]))
    runs = np.diff(bounds)
    if n and flat[0]:
        runs = np.concatenate(([0], runs))
    return runs


def encode(mask) -> dict:
    """COCO RLE of a binary mask.

    Parameters
    ----------
    mask : array_like of shape (H, W)
        Non-zero cells are inside.  Axis 0 is rows (y), axis 1 columns (x).

    Returns
    -------
    dict
        ``{"size": [H, W], "counts": str}``.

    Examples
    --------
    >>> m = np.zeros((3, 2), bool); m[1:, 0] = True
    >>> encode(m)
    {'size': [3, 2], 'counts': '123'}
    >>> decode(encode(m)).tolist() == m.tolist()
    True
    """
    m = np.asarray(mask)
    if m.ndim != 2:
        raise ValueError(f"mask must have shape (H, W) (got {m.shape})")
    h, w = m.shape
    flat = (m != 0).ravel(order="F")
    return {"size": [int(h), int(w)], "counts": counts_to_string(_runs_of_flat(flat))}


def encode_patch(mask_patch, row0: int, col0: int, height: int, width: int) -> dict:
    """COCO RLE of a canvas that is empty except for one local patch.

    Equal to ``encode(canvas)`` where ``canvas`` is an ``(height, width)``
    bool array of zeros with ``mask_patch`` pasted at ``(row0, col0)``, but the
    canvas is never built: runs are found in the patch's columns and placed at
    their column-major offsets.  Parts of the patch outside the canvas are
    ignored.

    Parameters
    ----------
    mask_patch : array_like of shape (h, w)
        Non-zero cells are inside.
    row0, col0 : int
        Canvas row and column of the patch's cell ``(0, 0)``; may be negative.
    height, width : int
        Canvas size ``H`` and ``W`` in pixels.

    Returns
    -------
    dict
        ``{"size": [height, width], "counts": str}``.

    Examples
    --------
    >>> p = np.ones((2, 2), bool)
    >>> full = np.zeros((4, 5), bool); full[1:3, 2:4] = True
    >>> encode_patch(p, 1, 2, 4, 5) == encode(full)
    True
    """
    p = np.asarray(mask_patch)
    if p.ndim != 2:
        raise ValueError(f"mask_patch must have shape (h, w) (got {p.shape})")
    height, width = int(height), int(width)
    row0, col0 = int(row0), int(col0)
    # Crop the patch to the canvas.
    r_lo, c_lo = max(0, -row0), max(0, -col0)
    r_hi = min(p.shape[0], height - row0)
    c_hi = min(p.shape[1], width - col0)
    n = height * width
    size = [height, width]
    if r_hi <= r_lo or c_hi <= c_lo:
        return {"size": size, "counts": counts_to_string([n])}
    p = p[r_lo:r_hi, c_lo:c_hi] != 0
    row0, col0 = row0 + r_lo, col0 + c_lo
    ph, pw = p.shape
    # One False row above and below each column so runs never span columns;
    # then the changes alternate: start of run 0, its end, start of run 1, ...
    stride = ph + 2
    padded = np.zeros((pw, stride), dtype=bool)  # row j = padded column j
    padded[:, 1:-1] = p.T
    flat = padded.ravel()
    idx = np.flatnonzero(flat[1:] != flat[:-1]) + 1
    if idx.size == 0:
        return {"size": size, "counts": counts_to_string([n])}
    col, row = np.divmod(idx, stride)
    g = (col + col0) * height + (row + (row0 - 1))  # canvas column-major offsets
    # A run ending where the next begins (whole-height columns) is one run.
    touch = np.flatnonzero(g[1:-1:2] == g[2::2])
    if touch.size:
        g = np.delete(g, np.concatenate((2 * touch + 1, 2 * touch + 2)))
    # counts: zeros before run 0, run 0, zeros between, run 1, ..., zeros after.
    edges = np.empty(g.size + 2, dtype=np.int64)
    edges[0], edges[1:-1], edges[-1] = 0, g, n
    runs = edges[1:] - edges[:-1]
    if runs[-1] == 0:
        runs = runs[:-1]
    return {"size": size, "counts": counts_to_string(runs)}


def _counts_of(rle: dict) -> np.ndarray:
    counts = rle["counts"]
    if isinstance(counts, (str, bytes)):
        return string_to_counts(counts)
    return np.asarray(counts, dtype=np.int64).ravel()


def decode(rle: dict) -> np.ndarray:
    """Binary mask of a COCO RLE.

    Parameters
    ----------
    rle : dict
        ``{"size": [H, W], "counts": str | bytes | list[int]}``.

    Returns
    -------
    ndarray of bool, shape (H, W)

    Raises
    ------
    ValueError
        When the run lengths are negative or do not add up to ``H * W``.
    """
    h, w = (int(v) for v in rle["size"])
    cnts = _counts_of(rle)
    if (cnts < 0).any():
        raise ValueError("RLE has a negative run length")
    if int(cnts.sum()) != h * w:
        raise ValueError(f"RLE run lengths add up to {int(cnts.sum())}, not H * W = {h * w}")
    values = (np.arange(cnts.size) % 2).astype(bool)
    flat = np.repeat(values, cnts)
    return flat.reshape((w, h)).T.copy()


def flat_indices(rle: dict) -> np.ndarray:
    """Column-major flat indices of the set pixels of a COCO RLE.

    Costs time in proportion to the set pixels, not the canvas: pixel
    ``(r, c)`` of an ``(H, W)`` mask has index ``c * H + r``.

    Returns
    -------
    ndarray of int64, shape (A,), increasing

    Examples
    --------
    >>> m = np.zeros((3, 2), bool); m[1:, 0] = True; m[0, 1] = True
    >>> flat_indices(encode(m)).tolist()
    [1, 2, 3]
    """
    cnts = _counts_of(rle)
    ends = np.cumsum(cnts)
    starts = ends[0::2]  # where each run of ones begins
    lengths = cnts[1::2]
    starts = starts[: lengths.size]
    total = int(lengths.sum())
    if total == 0:
        return np.zeros(0, dtype=np.int64)
    # offset of each set pixel from the start of its run
    first = np.cumsum(lengths) - lengths  # (R,) position of each run's first pixel in the output
    return np.repeat(starts - first, lengths) + np.arange(total, dtype=np.int64)


def area(rle: dict) -> int:
    """Number of set pixels of a COCO RLE (the sum of the odd-position runs).

    Examples
    --------
    >>> area(encode(np.ones((4, 4), bool)))
    16
    """
    return int(_counts_of(rle)[1::2].sum())
