"""Occluders: shapes placed over chosen objects so that each hides a drawn share of its target.

``objects.occlusion = [lo, hi]`` (see :class:`synthgen.config.ObjectSpec`) puts an
occluder over a share ``occlusion_share`` of the placed objects; :func:`place_occluder`
searches positions for one occluder until the share of its target it hides, measured
on the target's coverage samples, lies in ``[lo, hi]``.
"""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np

from synthgen.scene.coverage import coverage
from synthgen.scene.kinds import sample_objects
from synthgen.scene.shapes import Shape, exact_box, sample_inside

__all__ = ["add_occluders", "place_occluder"]


def _sample_points(cov) -> tuple[np.ndarray, np.ndarray]:
    """Coordinates (x, y) of the sub-samples inside a coverage patch, px, each (K,)."""
    h, w = cov.values.shape
    s = cov.samples
    inside = cov.inside(cov.row0, cov.col0, cov.row0 + h, cov.col0 + w)
    ii, jj = np.nonzero(inside)
    offs = (np.arange(s) + 0.5) / s
    xs = (np.arange(cov.col0, cov.col0 + w, dtype=np.float64)[:, None] + offs).ravel()
    ys = (np.arange(cov.row0, cov.row0 + h, dtype=np.float64)[:, None] + offs).ravel()
    return xs[jj], ys[ii]


#: Largest number of target samples the occluder search tests per step.
_OCCLUDER_SEARCH_SAMPLES = 1 << 15


def place_occluder(
    target: Shape,
    occluder: Shape,
    hidden: tuple[float, float],
    goal: float,
    direction: float,
    height: int,
    width: int,
    *,
    samples: int = 4,
    stroke: float = 0.0,
    max_size: float = math.inf,
) -> tuple[Shape, float] | None:
    """Move (and if needed enlarge) ``occluder`` so that it covers a share of ``target`` in ``hidden``.

    The share is counted on the target's sub-pixel samples on the canvas (the
    samples behind its coverage, :class:`synthgen.scene.shapes.Coverage`), exactly as
    the composer measures occlusion.  The occluder's centre moves along
    ``direction`` (radians, clockwise on screen from +x) from the target's
    centre; the distance is found by bisection, aiming at ``goal``.  When even
    a centred occluder covers less than ``goal``, it is enlarged by 1.5x up to
    six times, never beyond ``max_size``.

    Parameters
    ----------
    target, occluder : Shape
        ``target`` in place; ``occluder``'s position is ignored.
    hidden : (float, float)
        Accepted range of the covered share, in [0, 1].
    goal : float
        Share aimed at, inside ``hidden``.
    direction : float
        Radians.
    height, width : int
        Canvas size, px.
    samples : int
        Supersampling factor (``render.samples``).
    stroke : float
        The target's outline band, px (0 for filled).
    max_size : float
        Largest size (longer side of the exact box, px) the occluder may be
        enlarged to; one given larger keeps its size.

    Returns
    -------
    (Shape, float) or None
        The placed occluder and the share of the target it covers (which may
        miss ``hidden`` for targets of very few samples); None when the target
        has no sample on the canvas.

    Examples
    --------
    >>> t = Shape("rectangle", 32.0, 32.0, 20.0)
    >>> occ, share = place_occluder(t, Shape("ellipse", 0.0, 0.0, 20.0), (0.3, 0.4), 0.35, 0.0, 64, 64)
    >>> 0.3 <= share <= 0.4
    True
    """
    cov = coverage(target, height, width, samples=samples, stroke=stroke)
    if cov is None:
        return None
    xs_all, ys_all = _sample_points(cov)
    if xs_all.size == 0:
        return None
    # The search runs on an evenly strided subset of a big target's samples; the
    # share returned is counted on all of them.
    stride = max(1, xs_all.size // _OCCLUDER_SEARCH_SAMPLES)
    xs, ys = xs_all[::stride], ys_all[::stride]
    lo, hi = float(hidden[0]), float(hidden[1])
    ux, uy = math.cos(direction), math.sin(direction)
    tb = exact_box(target)

    def share(shape: Shape, r: float) -> tuple[Shape, float]:
        moved = replace(shape, cx=target.cx + r * ux, cy=target.cy + r * uy)
        return moved, float(np.count_nonzero(sample_inside(moved, xs, ys))) / xs.size

    occ = occluder
    best = share(occ, 0.0)
    for _ in range(6):
        if best[1] >= goal or occ.size >= max_size:
            break
        occ = replace(occ, size=min(occ.size * 1.5, max_size))
        best = share(occ, 0.0)
    if best[1] <= goal:
        return _exact_share(best, xs_all, ys_all, stride)
    ob = exact_box(occ)
    far = 0.5 * (math.hypot(tb[2] - tb[0], tb[3] - tb[1]) + math.hypot(ob[2] - ob[0], ob[3] - ob[1]))
    r_lo, r_hi = 0.0, far
    tol = 0.1 * (hi - lo) + 1e-3
    found = None
    for _ in range(40):
        mid = 0.5 * (r_lo + r_hi)
        cand = share(occ, mid)
        if lo <= cand[1] <= hi and (found is None or abs(cand[1] - goal) < abs(found[1] - goal)):
            found = cand
            if abs(cand[1] - goal) <= tol:
                break
        if cand[1] >= goal:
            r_lo, best = mid, cand
        else:
            r_hi = mid
    if found is None:  # the share jumps over the range (few samples, odd shapes): scan the distances
        for r in np.linspace(0.0, far, 65).tolist():
            cand = share(occ, r)
            if lo <= cand[1] <= hi:
                found = cand
                break
    return _exact_share(found if found is not None else best, xs_all, ys_all, stride)


def _exact_share(result, xs: np.ndarray, ys: np.ndarray, stride: int):
    shape, part = result
    if stride == 1:
        return shape, part
    return shape, float(np.count_nonzero(sample_inside(shape, xs, ys))) / xs.size


def add_occluders(shapes, styles, extras, config, rng: np.random.Generator):
    """Append one occluder per chosen target (drawn above every placed object)."""
    spec = config.objects
    height, width = config.canvas.height, config.canvas.width
    n = len(shapes)
    chosen = np.flatnonzero(rng.random(size=n) < spec.occlusion_share)
    # A ring centred on its target would hide nothing through its hole: occluders use the other kinds.
    solid = [k for k in spec.shapes if k != "ring"]
    occ_shapes, occ_styles = sample_objects(config, rng, n=len(chosen), kinds=solid or None)
    lo, hi = spec.occlusion
    goals = rng.uniform(lo, hi, size=len(chosen))
    angles = rng.uniform(0.0, 2.0 * math.pi, size=len(chosen))
    shapes, styles, extras = list(shapes), list(styles), list(extras)
    placed = missed = 0
    for k, t in enumerate(chosen.tolist()):
        got = place_occluder(
            shapes[t], occ_shapes[k], (lo, hi), float(goals[k]), float(angles[k]), height, width,
            samples=config.render.samples, stroke=styles[t]["stroke"], max_size=spec.size[1],
        )
        if got is None:
            continue
        occ, achieved = got
        style = dict(occ_styles[k], outline=False, stroke=0.0)  # filled, so it hides what it covers
        extras[t] = {**extras[t], "occlusion_id": placed, "occlusion_goal": float(goals[k]),
                     "occluder_hides": achieved}
        shapes.append(occ)
        styles.append(style)
        extras.append({"occlusion_id": placed, "occluder": True})
        placed += 1
        missed += not (lo <= achieved <= hi)
    return shapes, styles, extras, {"occluders": placed, "missed": missed}


# --------------------------------------------------------------------------- occlusion, from the top down
