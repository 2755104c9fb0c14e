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

__all__ = [
    "encode",
    "encode_patch",
    "encode_patches",
    "decode",
    "area",
    "flat_indices",
    "counts_to_string",
    "string_to_counts",
]

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
    runs = _patch_runs(p[r_lo:r_hi, c_lo:c_hi], row0 + r_lo, col0 + c_lo, height, n)
    return {"size": size, "counts": counts_to_string(runs)}


def _patch_runs(p: np.ndarray, row0: int, col0: int, height: int, n: int) -> np.ndarray:
    """Run lengths of an ``n``-pixel canvas of ``height`` rows, empty but for patch ``p`` at ``(row0, col0)``.

    The patch lies inside the canvas (callers crop it first).
    """
    p = p != 0
    ph, pw = p.shape
    # One False row above and below each column so runs never span columns;
    # then the changes alternate: start of run 0, its end, start of run 1, ...
    stride = ph + 2
    padded = np.zeros((pw, stride), dtype=bool)  # row j = padded column j
    padded[:, 1:-1] = p.T
    flat = padded.ravel()
    idx = np.flatnonzero(flat[1:] != flat[:-1]) + 1
    if idx.size == 0:
        return np.array([n], dtype=np.int64)
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
    return runs


def encode_patches(patches, height: int, width: int) -> list[dict]:
    """COCO RLE of many single-patch canvases at once: ``[encode_patch(p, r, c, height, width) ...]``.

    Equal, mask for mask, to :func:`encode_patch`; patches of one size are
    handled in one array pass and all count strings are built in one pass,
    which matters for images with hundreds of small objects.

    Parameters
    ----------
    patches : sequence of (row0, col0, mask_patch)
        As the arguments of :func:`encode_patch`.
    height, width : int
        Canvas size ``H`` and ``W`` in pixels.

    Returns
    -------
    list of dict
        ``{"size": [height, width], "counts": str}`` per patch.

    Examples
    --------
    >>> a, b = np.ones((2, 2), bool), np.eye(3, dtype=bool)
    >>> encode_patches([(1, 2, a), (0, 0, b)], 4, 5) == [encode_patch(a, 1, 2, 4, 5), encode_patch(b, 0, 0, 4, 5)]
    True
    """
    height, width = int(height), int(width)
    n = height * width
    size = [height, width]
    # pieces of the result: (mask indices, their run lengths end to end, runs per mask)
    order: list = []
    flats: list = []
    lengths: list = []
    empty = np.array([n], dtype=np.int64)
    by_size: dict = {}
    for k, (row0, col0, patch) in enumerate(patches):
        p = np.asarray(patch)
        if p.ndim != 2:
            raise ValueError(f"mask_patch must have shape (h, w) (got {p.shape})")
        row0, col0 = int(row0), int(col0)
        r_lo, c_lo = max(0, -row0), max(0, -col0)
        r_hi = min(p.shape[0], height - row0)
        c_hi = min(p.shape[1], width - col0)
        if r_hi <= r_lo or c_hi <= c_lo:
            order.append(k), flats.append(empty), lengths.append(1)
            continue
        p = p[r_lo:r_hi, c_lo:c_hi]
        by_size.setdefault(p.shape, []).append((k, row0 + r_lo, col0 + c_lo, p))
    for (ph, _), items in by_size.items():
        if len(items) == 1 or ph >= height:  # one patch of this size, or whole-height columns
            for k, r0, c0, p in items:
                r = _patch_runs(p, r0, c0, height, n)
                order.append(k), flats.append(r), lengths.append(r.size)
            continue
        runs, counts = _same_size_runs(items, height, n)
        order.extend(it[0] for it in items)
        flats.append(runs)
        lengths.extend(counts)
    strings = _many_counts_to_strings(np.concatenate(flats) if flats else np.zeros(0, np.int64),
                                      np.array(lengths, dtype=np.int64))
    out: list = [None] * len(patches)
    for k, text in zip(order, strings):
        out[k] = {"size": list(size), "counts": text}
    return out


def _same_size_runs(items: list, height: int, n: int) -> tuple[np.ndarray, list[int]]:
    """Run lengths of several patches of one size (``(k, row0, col0, patch)``, clipped), end to end,
    and the number of runs of each: as :func:`_patch_runs` per patch, in one array pass."""
    # as _patch_runs, for all patches of this size at once: a False cell above and
    # below each column, columns end to end, so runs never span columns (and,
    # shorter than the canvas, never touch the next column's)
    K = len(items)
    ph, pw = items[0][3].shape
    stride = ph + 2
    padded = np.zeros((K, pw, stride), dtype=bool)
    padded[:, :, 1:-1] = np.stack([it[3] for it in items]).transpose(0, 2, 1) != 0
    flat = padded.reshape(K, pw * stride)
    kk, idx = np.nonzero(flat[:, 1:] != flat[:, :-1])
    idx = idx + 1
    col, row = np.divmod(idx, stride)
    r0 = np.array([it[1] for it in items], dtype=np.int64)
    c0 = np.array([it[2] for it in items], dtype=np.int64)
    g = (col + c0[kk]) * height + (row + (r0[kk] - 1))  # canvas column-major offsets
    cnt = np.bincount(kk, minlength=K)  # changes per patch
    # per patch the edges 0, g..., n, end to end
    edges = np.empty(g.size + 2 * K, dtype=np.int64)
    start = np.cumsum(cnt + 2) - (cnt + 2)
    edges[start] = 0
    edges[start + cnt + 1] = n
    edges[np.arange(g.size) + 2 * kk + 1] = g
    d = edges[1:] - edges[:-1]
    keep = np.ones(d.size, dtype=bool)
    keep[(start + cnt + 1)[:-1]] = False  # from one patch's n to the next patch's 0
    last = start + cnt  # each patch's last run
    zero_last = d[last] == 0
    keep[last[zero_last]] = False
    return d[keep], (cnt + 1 - zero_last).tolist()


def _many_counts_to_strings(cnts: np.ndarray, lengths: np.ndarray) -> list[str]:
    """:func:`counts_to_string` of consecutive slices of ``cnts`` (``lengths`` each, all >= 1), in one pass."""
    if lengths.size == 0:
        return []
    cnts = cnts.astype(np.int64, copy=False)
    starts = np.cumsum(lengths) - lengths
    pos = np.arange(cnts.size, dtype=np.int64) - np.repeat(starts, lengths)  # index within its own counts
    x = cnts.copy()
    later = np.flatnonzero(pos > 2)
    x[later] -= cnts[later - 2]  # delta against the count two places earlier, within one mask
    mag = np.where(x < 0, ~x, x)
    if mag.size and mag.max() >= 1 << (5 * _MAX_GROUPS - 1):
        raise ValueError("RLE count too large to encode")
    bits = np.frexp(mag.astype(np.float64))[1] + 1
    groups = (bits + 4) // 5
    first = np.cumsum(groups) - groups
    total = int(groups.sum())
    j = np.arange(total, dtype=np.int64) - np.repeat(first, groups)
    v = np.repeat(x, groups)
    c = (v >> (5 * j)) & 0x1F
    c |= (j < np.repeat(groups, groups) - 1).astype(np.int64) << 5
    text = (c + 48).astype(np.uint8).tobytes().decode("ascii")
    ends = np.cumsum(groups)[np.cumsum(lengths) - 1].tolist()
    out, at = [], 0
    for e in ends:
        out.append(text[at:e])
        at = e
    return out


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
