"""Occlusion on sub-pixel samples: what each object shows of itself under the objects drawn above it.

The rule (the one :mod:`synthgen.scene` annotates by): a sub-pixel sample of an
object is *visible* when it lies inside the object and inside no object drawn
above it.  Samples are those of :class:`synthgen.scene.shapes.Coverage`: sample
``(i, j)`` of pixel ``(r, c)`` sits at ``x = c + (j + 0.5)/s``,
``y = r + (i + 0.5)/s``.

:class:`SampleBuffer` applies the rule to a whole scene in one walk from the
top object down: it holds one bit per sample of the canvas, set where an object
already walked (so one drawn above) covers the sample.  Each object is looked at
once, against the buffer alone, so the work per object follows the size of its
own patch and never the number of objects above it: a scene of ``N`` objects
costs time linear in ``N`` and memory of the canvas times ``s^2 / 8`` bytes,
however many objects end up hidden.

Bits are packed per pixel: ``ceil(s^2 / 8)`` bytes, sample ``(i, j)`` at bit
``i * s + j`` (little-endian bit order within a byte).
"""

from __future__ import annotations

import math
from functools import lru_cache
from typing import NamedTuple

import numpy as np

from synthgen.scene import shapes as shapes_mod

__all__ = ["SampleBuffer", "sample_bits", "sample_bits_many", "patch_bounds"]

#: Unsigned integer types as wide as a packed pixel of that many bytes.
_WORDS = {1: np.uint8, 2: np.uint16, 4: np.uint32, 8: np.uint64}

#: Number of set bits of every byte value.
_POPCOUNT = np.array([v.bit_count() for v in range(256)], dtype=np.uint8)
#: Number of set bits of every 16-bit value: a packed pixel at 3 or 4 samples a side (64 KB).
_POPCOUNT16 = _POPCOUNT[np.arange(1 << 16) & 0xFF] + _POPCOUNT[np.arange(1 << 16) >> 8]


def _set_bits(packed: np.ndarray) -> np.ndarray:
    """Set bits of each packed pixel (..., nb) -> (...): ``_POPCOUNT[packed].sum(axis=-1)``, the same counts.

    One table look-up per pixel where a pixel is one or two bytes (a sum over a
    trailing axis of 2 is several times slower than the look-up).
    """
    nb = packed.shape[-1]
    if nb == 1:
        return _POPCOUNT[packed[..., 0]]
    if nb == 2 and packed.flags.c_contiguous:
        return _POPCOUNT16[packed.view(np.uint16)[..., 0]]
    return _POPCOUNT[packed].sum(axis=-1, dtype=np.int32)


def _bytes_per_pixel(samples: int) -> int:
    return (samples * samples + 7) // 8


def _pack(samples_last: np.ndarray) -> np.ndarray:
    """Pack bool (..., s*s) sample flags into (..., ceil(s*s / 8)) bytes."""
    return np.packbits(samples_last, axis=-1, bitorder="little")


def _unpack(bits: np.ndarray, samples: int) -> np.ndarray:
    """Bool (..., s, s) sample flags [sub-row i, sub-column j] from packed bytes (..., nb)."""
    ss = samples * samples
    flat = np.unpackbits(bits, axis=-1, count=ss, bitorder="little")
    return flat.reshape(bits.shape[:-1] + (samples, samples)).view(bool)


@lru_cache(maxsize=16)
def _full_pixel(samples: int) -> np.ndarray:
    """The packed bytes (nb,) of a pixel all of whose samples are set (read-only)."""
    every = _pack(np.ones(samples * samples, dtype=bool))
    every.flags.writeable = False
    return every


def _full_pixels(mask: np.ndarray, samples: int) -> np.ndarray:
    """Packed pixels (h, w, nb) uint8: every sample set where ``mask`` (h, w) is, none elsewhere.

    The bytes of ``np.multiply(mask[..., None], every, dtype=np.uint8)`` (``every``
    the bytes of a full pixel), made as one integer per pixel where a packed pixel
    is 1, 2, 4 or 8 bytes (a product over a trailing axis of 2 is several times slower).
    """
    every = _full_pixel(samples)
    nb = every.size
    word = _WORDS.get(nb)
    if word is None:
        return np.multiply(mask[..., None], every, dtype=np.uint8)
    return (mask.astype(word, order="C") * every.view(word)[0]).view(np.uint8).reshape(mask.shape + (nb,))


def _point_samples(cov, rr: np.ndarray, cc: np.ndarray) -> np.ndarray:
    """Sub-sample inside-tests of canvas pixels ``(rr, cc)`` (K,) -> bool (K, s, s) [row, col].

    The same sample positions and point test as :meth:`synthgen.scene.shapes.Coverage.inside`.
    """
    s = cov.samples
    offs = (np.arange(s) + 0.5) / s
    xs = cc.astype(np.float64)[:, None, None] + offs[None, None, :]  # (K, 1, s)
    ys = rr.astype(np.float64)[:, None, None] + offs[None, :, None]  # (K, s, 1)
    # The region behind Coverage.inside (private to shapes.py): the same exact point test.
    region = shapes_mod.shape_region(cov.shape, cov.stroke)
    return np.broadcast_to(region.contains(xs, ys), (rr.size, s, s))


def patch_bounds(box, height: int, width: int) -> tuple[int, int, int, int] | None:
    """Canvas pixels ``(row0, col0, row1, col1)`` of the coverage patch of a shape with exact box ``box``.

    The rule of :func:`synthgen.scene.coverage.coverage`: the pixels that meet the
    exact box clipped to the canvas; None when that clipped box is empty.

    Examples
    --------
    >>> patch_bounds((-2.0, 1.5, 3.2, 4.0), 10, 10)
    (1, 0, 4, 4)
    """
    x0, y0 = max(box[0], 0.0), max(box[1], 0.0)
    x1, y1 = min(box[2], float(width)), min(box[3], float(height))
    if not (x0 < x1 and y0 < y1):
        return None
    return math.floor(y0), math.floor(x0), math.ceil(y1), math.ceil(x1)


def sample_bits(cov, inside: np.ndarray | None = None, edges: tuple | None = None) -> np.ndarray:
    """The samples inside a shape, packed per pixel of its coverage patch.

    Parameters
    ----------
    cov : synthgen.scene.shapes.Coverage
        The shape's coverage, patch of shape (h, w).
    inside : ndarray of bool, shape (h s, w s), optional
        The patch's sample mask when already known (``coverage_many`` hands it
        back for small shapes).
    edges : tuple, optional
        ``(interior, rr, cc, inside)`` of a shape whose pixels were settled by
        class (``coverage_many``'s ``edges``).  Without either, pixels of
        coverage 1 and 0 are settled from the coverage values and only the
        others are point-tested.

    Returns
    -------
    ndarray of uint8, shape (h, w, ceil(s^2 / 8))

    Examples
    --------
    >>> from synthgen.scene.shapes import Shape
    >>> from synthgen.scene.coverage import coverage
    >>> bits = sample_bits(coverage(Shape("rectangle", 2.0, 2.0, 1.0), 4, 4, samples=4))
    >>> bits.shape  # a unit square centred on a pixel corner: a quarter of each of 2 x 2 pixels
    (2, 2, 2)
    >>> bits[0, 0].tolist()  # of the top-left pixel, samples (i, j) with i, j in {2, 3}: bits 10, 11, 14, 15
    [0, 204]
    """
    s = cov.samples
    ss = s * s
    v = cov.values
    h, w = v.shape
    if inside is not None:
        flags = inside.reshape(h, s, w, s).transpose(0, 2, 1, 3).reshape(h, w, ss)
        return _pack(flags)
    if edges is not None:
        interior, rr, cc, flags = edges
        bits = _full_pixels(interior, s)  # (h, w, nb)
        if rr.size:
            bits[rr, cc] = _pack(flags.transpose(2, 0, 1).reshape(rr.size, ss))
        return bits
    bits = _full_pixels(v >= 1, s)
    rr, cc = np.nonzero((v > 0) & (v < 1))
    if rr.size:
        flags = _point_samples(cov, rr + cov.row0, cc + cov.col0).reshape(rr.size, ss)
        bits[rr, cc] = _pack(flags)
    return bits


def sample_bits_many(covs, insides) -> list:
    """:func:`sample_bits` of many shapes, ``[sample_bits(c, m) for c, m in zip(covs, insides)]``.

    Shapes that come with their sample mask are packed together, a group of
    equal patch sizes at a time (the same bits as one by one).

    Parameters
    ----------
    covs : sequence of synthgen.scene.shapes.Coverage
    insides : sequence of (ndarray or tuple or None)
        Per shape, its whole-patch sample mask, its ``edges`` tuple from
        ``coverage_many``, or None.
    """
    out: list = [None] * len(covs)
    groups: dict = {}
    for k, (cov, inside) in enumerate(zip(covs, insides)):
        if isinstance(inside, np.ndarray):
            groups.setdefault(cov.values.shape, []).append(k)
        else:
            out[k] = sample_bits(cov, edges=inside)
    for (h, w), ks in groups.items():
        s = covs[ks[0]].samples
        flags = np.stack([insides[k] for k in ks]).reshape(len(ks), h, s, w, s)
        packed = _pack(flags.transpose(0, 1, 3, 2, 4).reshape(len(ks), h, w, s * s))
        for j, k in enumerate(ks):
            out[k] = packed[j]
    return out


class SampleBuffer:
    """The sub-pixel samples of a canvas that the objects walked so far cover.

    Walk the objects from the top down: :meth:`visible` tells what an object
    shows under the objects already walked, :meth:`cover` adds it (for an
    object that stays in the picture).

    Parameters
    ----------
    height, width : int
        Canvas size in pixels.
    samples : int
        Supersampling factor ``s`` (``render.samples``).

    Examples
    --------
    >>> from synthgen.scene.shapes import Shape
    >>> from synthgen.scene.coverage import coverage
    >>> buf = SampleBuffer(8, 8, 4)
    >>> top = coverage(Shape("rectangle", 4.0, 4.0, 4.0), 8, 8)   # pixels 2..5
    >>> low = coverage(Shape("rectangle", 3.0, 4.0, 4.0), 8, 8)   # pixels 1..4: 3 of 4 columns under top
    >>> buf.cover(top, sample_bits(top))
    >>> visible, box = buf.visible(low, sample_bits(low))
    >>> float(visible.sum()), box.tolist()
    (4.0, [1.0, 2.0, 2.0, 6.0])
    """

    def __init__(self, height: int, width: int, samples: int):
        self.samples = int(samples)
        self.taken = np.zeros((int(height), int(width), _bytes_per_pixel(self.samples)), dtype=np.uint8)
        self.full = np.zeros((int(height), int(width)), dtype=bool)  # every sample of the pixel covered
        self._all = _pack(np.ones(self.samples * self.samples, dtype=bool))  # the bytes of a covered pixel

    def hides(self, row0: int, col0: int, row1: int, col1: int) -> bool:
        """Whether every sample of the canvas pixels ``row0:row1, col0:col1`` is covered already.

        Then nothing of a shape whose patch these pixels are can show, and its
        coverage need not be computed.
        """
        return bool(self.full[row0:row1, col0:col1].all())

    def _view(self, cov) -> np.ndarray:
        h, w = cov.values.shape
        return self.taken[cov.row0 : cov.row0 + h, cov.col0 : cov.col0 + w]

    def visible(self, cov, bits: np.ndarray) -> tuple[np.ndarray, np.ndarray | None]:
        """Visible coverage of a shape under what is covered so far, and the box of its visible samples.

        Parameters
        ----------
        cov : synthgen.scene.shapes.Coverage
        bits : ndarray of uint8, shape (h, w, nb)
            :func:`sample_bits` of ``cov``.

        Returns
        -------
        visible : ndarray of float32, shape (h, w)
            ``cov.values`` itself when no sample is hidden, else the share of
            each pixel's samples that are inside and visible.
        sample_box : ndarray of shape (4,) or None
            Tight box (xyxy, px) of the visible sample cells when some sample is
            hidden and some stays visible; None otherwise.
        """
        taken = self._view(cov)
        hidden = bits & taken
        if not hidden.any():
            return cov.values, None
        s = self.samples
        lost = _set_bits(hidden)
        visible = cov.values - lost.astype(np.float32) / (s * s)
        np.clip(visible, 0.0, 1.0, out=visible)
        support = visible > 0
        if not support.any():
            return visible, None
        return visible, _seen_box(bits & ~taken, support, s, cov.row0, cov.col0)

    def visible_many(self, covs, bits) -> tuple[list, np.ndarray, _Pixels]:
        """:meth:`visible` of shapes whose patches do not meet, in one pass over all their pixels.

        The values are those :meth:`visible` gives one shape at a time: the
        same element-wise arithmetic on the same numbers.

        Parameters
        ----------
        covs : sequence of synthgen.scene.shapes.Coverage
            Patches that share no pixel.
        bits : sequence of ndarray
            :func:`sample_bits` of each.

        Returns
        -------
        results : list of (visible, sample_box)
            As :meth:`visible` returns them, one per shape.
        hides : ndarray of bool, shape (K,)
            Per shape, whether every sample of its patch was covered already
            (what :meth:`hides` says of its patch).
        pixels : object
            The pixels gathered, for :meth:`cover_many`.
        """
        s = self.samples
        k = len(covs)
        hs = np.array([c.values.shape[0] for c in covs])
        ws = np.array([c.values.shape[1] for c in covs])
        sizes = hs * ws
        starts = np.cumsum(sizes) - sizes
        seg = np.repeat(np.arange(k), sizes)  # patch of each listed pixel (each patch row by row)
        local = np.arange(seg.size) - starts[seg]
        rr = np.array([c.row0 for c in covs])[seg] + local // ws[seg]
        cc = np.array([c.col0 for c in covs])[seg] + local % ws[seg]
        flat = rr * self.full.shape[1] + cc  # canvas pixel of each, row-major
        own = np.concatenate([b.reshape(-1, b.shape[-1]) for b in bits])  # (M, nb)
        taken = self._take(flat)  # (M, nb)
        hides = np.bincount(seg, weights=~self.full.reshape(-1).take(flat), minlength=k) == 0
        hidden = own & taken
        lost = _set_bits(hidden)  # (M,)
        occluded = np.bincount(seg, weights=lost > 0, minlength=k) > 0
        values = np.concatenate([c.values.ravel() for c in covs])  # (M,) float32
        visible = values - lost.astype(np.float32) / (s * s)
        np.clip(visible, 0.0, 1.0, out=visible)
        results = []
        for t, cov in enumerate(covs):
            if not occluded[t]:
                results.append((cov.values, None))
                continue
            a, b = int(starts[t]), int(starts[t] + sizes[t])
            vis = visible[a:b].reshape(cov.values.shape)
            support = vis > 0
            box = None
            if support.any():
                seen = (own[a:b] & ~taken[a:b]).reshape(cov.values.shape + (own.shape[1],))
                box = _seen_box(seen, support, s, cov.row0, cov.col0)
            results.append((vis, box))
        return results, hides, _Pixels(flat, seg, own, taken)

    def cover_many(self, pixels: _Pixels, which) -> None:
        """:meth:`cover` the shapes ``which`` (bool per shape) of a :meth:`visible_many` call."""
        sel = np.asarray(which, dtype=bool)[pixels.seg]
        flat = pixels.flat[sel]
        now = pixels.taken[sel] | pixels.own[sel]  # the patches share no pixel: no index repeats
        self._put(flat, now)
        self.full.reshape(-1)[flat] = self._covered(now)

    # Gathers and scatters of packed pixels by flat canvas index, one integer per pixel where a packed
    # pixel is 1, 2, 4 or 8 bytes: the same bytes as ``taken[rr, cc]``, about ten times faster than
    # fancy indexing rows of nb bytes.

    def _take(self, flat: np.ndarray) -> np.ndarray:
        """``taken[rr, cc]`` (M, nb) of the canvas pixels ``flat`` = ``rr * width + cc``."""
        nb = self.taken.shape[-1]
        word = _WORDS.get(nb)
        if word is None:
            return self.taken.reshape(-1, nb)[flat]
        return self.taken.view(word).reshape(-1).take(flat).view(np.uint8).reshape(flat.size, nb)

    def _put(self, flat: np.ndarray, values: np.ndarray) -> None:
        """``taken[rr, cc] = values`` (M, nb) at the canvas pixels ``flat`` (no index repeated)."""
        nb = self.taken.shape[-1]
        word = _WORDS.get(nb)
        if word is None:
            self.taken.reshape(-1, nb)[flat] = values
            return
        self.taken.view(word).reshape(-1)[flat] = np.ascontiguousarray(values).view(word).reshape(-1)

    def cover(self, cov, bits: np.ndarray) -> None:
        """Mark the samples of a shape as covered, for the objects walked after it (drawn below it)."""
        taken = self._view(cov)
        np.bitwise_or(taken, bits, out=taken)
        h, w = cov.values.shape
        self.full[cov.row0 : cov.row0 + h, cov.col0 : cov.col0 + w] = self._covered(taken)

    def _covered(self, taken: np.ndarray) -> np.ndarray:
        """Bool (..., ) of packed pixels (..., nb): all samples set."""
        nb = taken.shape[-1]
        if nb in _WORDS:  # one integer per pixel: one comparison instead of nb and a reduction
            return taken.view(_WORDS[nb])[..., 0] == self._all.view(_WORDS[nb])[0]
        return (taken == self._all).all(axis=-1)


#: Patches up to this many pixels get the box of their visible samples from all their samples at once.
_SMALL_BOX_PIXELS = 256


class _Pixels(NamedTuple):
    """Pixels of patches gathered by :meth:`SampleBuffer.visible_many`, each (M,) or (M, nb)."""

    flat: np.ndarray  # canvas pixel, row * width + column
    seg: np.ndarray
    own: np.ndarray
    taken: np.ndarray


def _seen_box(seen: np.ndarray, support: np.ndarray, s: int, row0: int, col0: int) -> np.ndarray:
    """Tight box of the set sample cells of packed ``seen`` (h, w, nb), pixel support ``support`` (h, w).

    Only the outermost pixel rows and columns of the support can hold its
    edges, so only they are unpacked.  The values are those of
    ``synthgen.geometry.mask_box(samples, origin=(col0, row0), scale=1 / s)``.
    """
    h, w = support.shape
    if h * w <= _SMALL_BOX_PIXELS:  # few pixels: unpack them all at once (fewer calls)
        cells = _unpack(seen, s).transpose(0, 2, 1, 3).reshape(h * s, w * s)
        rows = np.flatnonzero(cells.any(axis=1))
        cols = np.flatnonzero(cells.any(axis=0))
        scale = 1.0 / s
        return np.array(
            [col0 + cols[0] * scale, row0 + rows[0] * scale, col0 + (cols[-1] + 1) * scale,
             row0 + (rows[-1] + 1) * scale],
            dtype=np.float64,
        )
    rows = np.flatnonzero(support.any(axis=1))
    cols = np.flatnonzero(support.any(axis=0))
    top, bottom, left, right = int(rows[0]), int(rows[-1]), int(cols[0]), int(cols[-1])
    j_left = int(np.flatnonzero(_unpack(seen[:, left], s).any(axis=(0, 1)))[0])
    j_right = int(np.flatnonzero(_unpack(seen[:, right], s).any(axis=(0, 1)))[-1])
    i_top = int(np.flatnonzero(_unpack(seen[top], s).any(axis=(0, 2)))[0])
    i_bottom = int(np.flatnonzero(_unpack(seen[bottom], s).any(axis=(0, 2)))[-1])
    scale = 1.0 / s
    return np.array(
        [
            col0 + (left * s + j_left) * scale,
            row0 + (top * s + i_top) * scale,
            col0 + (right * s + j_right + 1) * scale,
            row0 + (bottom * s + i_bottom + 1) * scale,
        ],
        dtype=np.float64,
    )
