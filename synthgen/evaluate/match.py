"""COCO's greedy matching of detections to ground truth, the one matcher of synthgen.

:func:`build_problem` puts detections in match order and pairs each with the ground truth of
its image and category; :func:`match` matches them at every IoU threshold and every range at
once (the rules are in :mod:`synthgen.evaluate.cocoeval`'s docstring).  Boxes are COCO
``[x, y, w, h]`` as stored, so that IoUs compare with thresholds bit for bit as in the reference.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from synthgen.evaluate.parse import Preds, Truth


def coco_iou(d: np.ndarray, g: np.ndarray, crowd: np.ndarray) -> np.ndarray:
    """Element-wise IoU of COCO boxes by the reference rules.

    Parameters
    ----------
    d, g : ndarray of shape (P, 4)
        Detection and ground-truth boxes ``[x, y, w, h]`` in px.
    crowd : ndarray of bool, shape (P,)
        Whether the ground truth is a crowd region; its "IoU" is then the
        intersection over the detection's area.

    Returns
    -------
    ndarray of shape (P,)
        Areas are ``w * h`` of the stored sizes and the union is
        ``(da + ga) - inter``, evaluated in that order, so that threshold
        comparisons agree with the reference bit for bit.
    """
    with np.errstate(over="ignore"):  # absurd but finite boxes (1e308) overflow to inf, as in the reference
        iw = np.minimum(d[:, 0] + d[:, 2], g[:, 0] + g[:, 2]) - np.maximum(d[:, 0], g[:, 0])
        ih = np.minimum(d[:, 1] + d[:, 3], g[:, 1] + g[:, 3]) - np.maximum(d[:, 1], g[:, 1])
        inter = np.maximum(iw, 0) * np.maximum(ih, 0)  # 0 for disjoint pairs (whose product may overflow)
        da = d[:, 2] * d[:, 3]
        union = np.where(crowd, da, da + g[:, 2] * g[:, 3] - inter)
    out = np.zeros(len(d))
    np.divide(inter, union, out=out, where=(iw > 0) & (ih > 0))
    return out


@dataclass(frozen=True, slots=True)
class Problem:
    """Detections kept for evaluation and their candidate pairs.

    Detections (D of them) are in *match order*: by rank within their image
    and category (rank 0 = highest score), then by image and category.  Pairs
    (P of them) join each detection to every ground truth of its image and
    category (with an IoU of at least ``min_iou`` when :func:`build_problem`
    was given one), in detection order and then file order of the ground truth.
    """

    rec: np.ndarray  # (D,) index of the record in the predictions list
    img: np.ndarray  # (D,)
    cat: np.ndarray  # (D,)
    rank: np.ndarray  # (D,)
    score: np.ndarray  # (D,)
    box: np.ndarray  # (D, 4)
    p_det: np.ndarray  # (P,) detection index
    p_gt: np.ndarray  # (P,) ground-truth index
    p_iou: np.ndarray  # (P,)
    acc_order: np.ndarray  # (D,) detections by category, -score, image, rank
    cat_start: np.ndarray  # (K + 1,) first position of each category in acc_order


#: Detections handled at once when listing pairs (bounds the size of temporary arrays).
_CHUNK = 1 << 15


def build_problem(truth: Truth, preds: Preds, max_det: int | None, min_iou: float | None = None) -> Problem:
    """Detections in match order (at most ``max_det`` per image and category; None keeps all) and their pairs.

    With ``min_iou``, pairs whose IoU is below it are left out (they can match at no threshold >= ``min_iou``).
    """
    k_cats = len(truth.cat_ids)
    idx = np.flatnonzero(preds.cat >= 0)
    group = preds.img[idx] * k_cats + preds.cat[idx]
    # Stable order by descending score within each image and category.
    order = np.lexsort((idx, -preds.score[idx], group))
    sorted_group = group[order]
    n = len(order)
    first = np.ones(n, dtype=bool)
    first[1:] = sorted_group[1:] != sorted_group[:-1]
    rank = np.arange(n) - np.maximum.accumulate(np.where(first, np.arange(n), 0))
    keep = rank < max_det if max_det is not None else np.ones(n, dtype=bool)
    order, rank, sorted_group = order[keep], rank[keep], sorted_group[keep]
    mo = np.lexsort((sorted_group, rank))
    rec = idx[order[mo]]
    rank = rank[mo]
    d_group = sorted_group[mo]
    d_count = len(rec)

    g_group = truth.img * k_cats + truth.cat
    g_order = np.argsort(g_group, kind="stable")
    g_sorted = g_group[g_order]
    lo = np.searchsorted(g_sorted, d_group, side="left")
    cnt = np.searchsorted(g_sorted, d_group, side="right") - lo
    box = preds.box[rec]
    chunks = []
    for d0 in range(0, d_count, _CHUNK):  # in slices of detections, so that the temporaries stay small
        d1 = min(d0 + _CHUNK, d_count)
        c = cnt[d0:d1]
        p_det = np.repeat(np.arange(d0, d1), c)
        within = np.arange(len(p_det)) - np.repeat(np.cumsum(c) - c, c)
        p_gt = g_order[np.repeat(lo[d0:d1], c) + within]
        p_iou = coco_iou(box[p_det], truth.box[p_gt], truth.crowd[p_gt])
        if min_iou is not None:
            kept = p_iou >= min_iou
            p_det, p_gt, p_iou = p_det[kept], p_gt[kept], p_iou[kept]
        chunks.append((p_det, p_gt, p_iou))
    p_det, p_gt, p_iou = (np.concatenate(c) for c in zip(*chunks)) if chunks else (
        np.zeros(0, np.int64), np.zeros(0, np.int64), np.zeros(0))

    cat = preds.cat[rec]
    img = preds.img[rec]
    score = preds.score[rec]
    acc_order = np.lexsort((rank, img, -score, cat))
    cat_start = np.searchsorted(cat[acc_order], np.arange(k_cats + 1), side="left")
    return Problem(rec, img, cat, rank, score, box, p_det, p_gt, p_iou, acc_order, cat_start)


def match(pb: Problem, gt_ignore: np.ndarray, crowd: np.ndarray, thresholds: np.ndarray) -> np.ndarray:
    """Greedy matching at every IoU threshold and every range.

    Parameters
    ----------
    gt_ignore : ndarray of bool, shape (A, G)
        Per range, which ground truths are ignored (crowd or out of range).
    crowd : ndarray of bool, shape (G,)
    thresholds : ndarray of float, shape (T,)
        IoU thresholds.

    Returns
    -------
    ndarray of int, shape (A, T, D)
        Index of the matched ground truth, or -1.

    Notes
    -----
    A detection's choice among its free candidates with IoU >= t is the
    maximum of one integer key per pair: ``counted * big + iou_rank * width +
    position``, where ``iou_rank`` is the pair's IoU's rank among all distinct
    IoUs and ``position`` its place in file order within the detection's
    candidates (``width`` bounds it).  So an object that counts beats any
    ignored one, then the higher IoU wins, then the later annotation, which is
    the reference's order of preference.
    """
    n_a, n_g = gt_ignore.shape
    n_t = len(thresholds)
    n_d = len(pb.rec)
    matched = np.full((n_a, n_t, n_d), -1, dtype=np.int64)
    thresholds = np.asarray(thresholds)
    # A pair below the lowest threshold is never eligible: leave it out (the order of the rest is kept).
    kept = np.flatnonzero(pb.p_iou >= thresholds.min()) if n_t else np.zeros(0, np.int64)
    if len(kept) == 0:
        return matched
    p_det, p_gt, p_iou = pb.p_det[kept], pb.p_gt[kept], pb.p_iou[kept]
    # Pairs are in match order, so by rank: the pairs of each rank are one run.
    rank_start = np.searchsorted(pb.rank[p_det], np.arange(int(pb.rank[p_det[-1]]) + 2), side="left")
    taken = np.zeros((n_a, n_t, n_g), dtype=bool)
    thr = thresholds[None, :, None]
    new_seg = np.r_[True, p_det[1:] != p_det[:-1]]
    seg_first = np.flatnonzero(new_seg)
    position = np.arange(len(p_det)) - np.repeat(seg_first, np.diff(np.r_[seg_first, len(p_det)]))
    width = int(position.max()) + 1
    iou_rank = np.unique(p_iou, return_inverse=True)[1].reshape(-1)
    big = (int(iou_rank.max()) + 1) * width
    key_base = iou_rank * width + position  # (P,)
    counted_key = np.where(gt_ignore, 0, big)  # (A, G)
    for r in range(len(rank_start) - 1):
        p0, p1 = rank_start[r], rank_start[r + 1]
        if p0 == p1:
            continue
        # Within one rank each image-category group has at most one detection,
        # so the detections of a rank are matched simultaneously.
        pg = p_gt[p0:p1]
        starts = np.flatnonzero(new_seg[p0:p1])
        eligible = (~taken[:, :, pg] | crowd[pg]) & (p_iou[p0:p1] >= thr)  # (A, T, P)
        key = key_base[p0:p1] + counted_key[:, pg][:, None, :]  # (A, 1, P)
        best = np.maximum.reduceat(np.where(eligible, key, -1), starts, axis=2)  # (A, T, S)
        a_i, t_i, s_i = np.nonzero(best >= 0)
        pair = p0 + starts[s_i] + best[a_i, t_i, s_i] % width
        g_i = p_gt[pair]
        taken[a_i, t_i, g_i] = True
        matched[a_i, t_i, p_det[pair]] = g_i
    return matched
