"""Token sequences for sequence-style detectors: one JSON line per image, writer and reader.

Rule
----
Each axis of an image is cut into ``n_bins`` equal bins; on an axis of ``L``
pixels (``L`` = width for x, height for y) a bin is ``L / n_bins`` px wide and::

    token = min(floor(v * n_bins / L), n_bins - 1)      (clipped at 0)
    v'    = (token + 0.5) * L / n_bins                   (the bin centre)

so ``|v - v'| <= L / (2 n_bins)`` for ``0 <= v <= L``, with equality on bin
edges.  Token ids (with ``C`` categories, in order of category id):

=====================  ==========================================
``0 .. n_bins - 1``    coordinate bins (shared by x and y)
``n_bins + i``         class ``i`` (the i-th category by id)
``n_bins + C``         noise (a training noise object)
``n_bins + C + 1``     end of sequence
=====================  ==========================================

A sequence is, per object, ``x0 y0 x1 y1 class`` from the annotated (visible)
box, objects in the chosen ``order``, then any noise objects (class token
``noise``) in the order given, then ``end``.  Ignore regions (annotations with
``iscrowd`` 1) are no objects and are left out.  Orders:

* ``random``: a permutation drawn for image ``k`` from
  ``SeedSequence(seed, spawn_key=(k, ORDER_STREAM))`` (a child of the image's
  own seed sequence, apart from the streams that draw the scene);
* ``raster``: by the box's top edge, then its left edge (top-left first);
* ``area``: by box area, largest first;
* ``distance``: by the distance of the box centre from the image origin, nearest first.

Ties keep annotation order.  Each line also carries ``weights`` (one per token):
1, except 0 for the four coordinate tokens of a noise object, whose box is not
a target.  The vocabulary file (``tokens.vocab.json``) states all of this:
token ranges, bin count, image size, the quantization and dequantization rule.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np
import orjson

from synthgen._io import read_input
from synthgen.errors import InputFileError, check_choice, check_number, is_int
from synthgen.formats._common import (
    annotations_by_image,
    bad_record,
    categories_in_order,
    image_index,
)
from synthgen.formats.dataset_dir import TOKENS, TOKENS_VOCAB
from synthgen.geometry import as_boxes, box_area
from synthgen.seeding import ORDER_STREAM, stream

if TYPE_CHECKING:
    from synthgen.formats.check_context import CheckContext

__all__ = [
    "ORDERS",
    "check_tokens",
    "ORDER_STREAM",
    "quantize",
    "dequantize",
    "object_order",
    "vocabulary",
    "encode_objects",
    "check_token_options",
    "write_tokens",
    "read_vocabulary",
    "parse_tokens",
    "read_tokens",
]

ORDERS = ("random", "raster", "area", "distance")


def quantize(values, length: float, n_bins: int) -> np.ndarray:
    """Bin index of each coordinate on an axis of ``length`` pixels.

    Parameters
    ----------
    values : array_like
        Coordinates in pixels.
    length : float
        Axis length ``L`` in pixels (image width for x, height for y).
    n_bins : int

    Returns
    -------
    ndarray of int64, same shape
        ``clip(floor(v * n_bins / L), 0, n_bins - 1)``.

    Examples
    --------
    >>> quantize([0.0, 15.9, 16.0, 256.0], 256, 16).tolist()
    [0, 0, 1, 15]
    """
    v = np.asarray(values, dtype=np.float64)
    return np.clip(np.floor(v * (n_bins / length)), 0, n_bins - 1).astype(np.int64)


def dequantize(tokens, length: float, n_bins: int) -> np.ndarray:
    """Bin centre, in pixels, of each coordinate token.

    Examples
    --------
    >>> dequantize([0, 15], 256, 16).tolist()
    [8.0, 248.0]
    """
    return (np.asarray(tokens, dtype=np.float64) + 0.5) * (length / n_bins)


def object_order(boxes, order: str, *, rng: np.random.Generator | None = None) -> np.ndarray:
    """Positions of ``boxes`` in sequence order.

    Parameters
    ----------
    boxes : array_like of shape (N, 4)
        xyxy boxes in pixels.
    order : {"random", "raster", "area", "distance"}
        See the module rule.
    rng : numpy.random.Generator
        Required for ``"random"``.

    Returns
    -------
    ndarray of int64, shape (N,)
        A permutation of ``range(N)``.

    Examples
    --------
    >>> object_order([[5, 5, 6, 6], [0, 9, 9, 10], [1, 0, 2, 1]], "raster").tolist()
    [2, 0, 1]
    """
    b = as_boxes(boxes)
    n = b.shape[0]
    if order == "random":
        if rng is None:
            raise ValueError("order 'random' needs an rng")
        return rng.permutation(n).astype(np.int64)
    if order == "raster":
        return np.lexsort((b[:, 0], b[:, 1])).astype(np.int64)
    if order == "area":
        return np.argsort(-box_area(b), kind="stable").astype(np.int64)
    if order == "distance":
        cx = (b[:, 0] + b[:, 2]) / 2
        cy = (b[:, 1] + b[:, 3]) / 2
        return np.argsort(np.hypot(cx, cy), kind="stable").astype(np.int64)
    raise ValueError(f"order must be one of {', '.join(ORDERS)} (got {order!r})")


def vocabulary(categories: list[dict], n_bins: int, size: tuple[int, int] | None, *, order: str, seed: int) -> dict:
    """The vocabulary document written beside the token file.

    Parameters
    ----------
    categories : list of dict
        COCO categories (sorted by id here).
    n_bins : int
    size : (width, height) or None
        The image size when all images share it, else None (each line has its own).
    order : str
    seed : int
    """
    cats = sorted(categories, key=lambda c: c["id"])
    c = len(cats)
    return {
        "format": "synthgen token sequences",
        "n_bins": n_bins,
        "image_size": None if size is None else {"width": size[0], "height": size[1]},
        "vocab_size": n_bins + c + 2,
        "ranges": {
            "coordinate": [0, n_bins - 1],
            "class": [n_bins, n_bins + c - 1],
            "noise": [n_bins + c, n_bins + c],
            "end": [n_bins + c + 1, n_bins + c + 1],
        },
        "classes": [{"token": n_bins + i, "category_id": k["id"], "name": k["name"]} for i, k in enumerate(cats)],
        "layout": "per object: x0 y0 x1 y1 class; objects in 'order', then noise objects, then end",
        "quantize": "token = min(max(floor(v * n_bins / L), 0), n_bins - 1); L = width for x0 and x1, height for y0 and y1",
        "dequantize": "v = (token + 0.5) * L / n_bins",
        "max_error_px": "L / (2 * n_bins)",
        "weights": "1 per token, except 0 for the 4 coordinate tokens of a noise object",
        "order": order,
        "seed": seed,
        "random_order_stream": f"SeedSequence(seed, spawn_key=(image_index, {ORDER_STREAM}))",
    }


def encode_objects(
    boxes,
    class_tokens,
    width: float,
    height: float,
    n_bins: int,
    *,
    end_token: int,
    noise_boxes=None,
    noise_token: int | None = None,
) -> tuple[list[int], list[int]]:
    """Token sequence and per-token weights of objects already in sequence order.

    Parameters
    ----------
    boxes : array_like of shape (N, 4)
        xyxy boxes in pixels, in sequence order.
    class_tokens : array_like of int, shape (N,)
    width, height : float
        Image size in pixels.
    n_bins : int
    end_token : int
    noise_boxes : array_like of shape (M, 4), optional
        Training noise objects, appended with ``noise_token`` and zero
        coordinate weights.
    noise_token : int, optional

    Returns
    -------
    tokens, weights : list of int
        Both of length ``5 * (N + M) + 1``.
    """
    b = as_boxes(boxes)
    nb = as_boxes(noise_boxes if noise_boxes is not None else [])
    allb = np.vstack([b, nb])  # (N + M, 4)
    q = np.empty((allb.shape[0], 5), dtype=np.int64)
    q[:, [0, 2]] = quantize(allb[:, [0, 2]], width, n_bins)  # x0, x1
    q[:, [1, 3]] = quantize(allb[:, [1, 3]], height, n_bins)  # y0, y1
    q[: b.shape[0], 4] = np.asarray(class_tokens, dtype=np.int64).reshape(-1)
    w = np.ones_like(q)
    if nb.shape[0]:
        if noise_token is None:
            raise ValueError("noise boxes need a noise token")
        q[b.shape[0] :, 4] = noise_token
        w[b.shape[0] :, :4] = 0
    return q.ravel().tolist() + [end_token], w.ravel().tolist() + [1]


def check_token_options(n_bins: int, order: str) -> None:
    """Raise :class:`~synthgen.errors.ConfigError` unless ``n_bins`` and ``order`` are allowed."""
    check_number("tokens.n_bins", n_bins, lo=1, integer=True)
    check_choice("tokens.order", order, ORDERS)


def write_tokens(
    coco: dict,
    path,
    vocab_path,
    *,
    n_bins: int = 1000,
    order: str = "random",
    seed: int = 0,
    noise: Mapping[int, object] | Callable | None = None,
) -> int:
    """Write ``tokens.jsonl`` (one line per image) and its vocabulary file.

    Parameters
    ----------
    coco : dict
        COCO dict.
    path, vocab_path : str or Path
        Output files, e.g. ``DIR/tokens.jsonl`` and ``DIR/tokens.vocab.json``.
    n_bins : int
        Bins per axis.
    order : {"random", "raster", "area", "distance"}
    seed : int
        Root seed for the ``random`` order (the dataset's seed).
    noise : mapping or callable, optional
        Training noise objects per image, appended after the real objects.
        Either a mapping image id -> noise, or a callable
        ``noise(k, boxes, category_ids, (width, height)) -> noise`` called with
        image index ``k`` and the image's annotated xyxy boxes and category ids
        in annotation order (returning None for no noise).  A noise value is
        ``(boxes, labels)`` -- boxes float (M, 4) xyxy in pixels, labels (M,)
        ints recorded verbatim as ``noise_labels`` (e.g. the category id a noise
        box was jittered from, -1 for a random box) -- or a result with
        ``boxes``, ``is_noise`` and optionally ``source`` arrays (as the jitter
        module's ``pad_with_noise`` returns, given the boxes in annotation
        order): its noise rows are used and ``noise_labels`` is the category id
        of each ``source`` box, -1 where ``source`` is -1.

    Returns
    -------
    int
        Number of lines written.

    Each line: ``image_id``, ``file_name``, ``width``, ``height``,
    ``n_objects``, ``n_noise``, ``annotation_ids`` (in sequence order),
    ``noise_labels``, ``tokens``, ``weights``.
    """
    check_token_options(n_bins, order)
    cats = categories_in_order(coco)
    class_token = {c["id"]: n_bins + i for i, c in enumerate(cats)}
    noise_token = n_bins + len(cats)
    sizes = {(im["width"], im["height"]) for im in coco["images"]}
    size = next(iter(sizes)) if len(sizes) == 1 else None
    by_image = annotations_by_image(coco)
    lines = []
    for pos, im in enumerate(coco["images"]):
        anns = [a for a in by_image.get(im["id"], []) if a.get("iscrowd", 0) != 1]
        line = _image_line(im, pos, anns, class_token, noise_token, n_bins=n_bins, order=order, seed=seed, noise=noise)
        lines.append(orjson.dumps(line))
    Path(path).write_bytes(b"\n".join(lines) + (b"\n" if lines else b""))
    vocab = vocabulary(cats, n_bins, size, order=order, seed=seed)
    Path(vocab_path).write_bytes(orjson.dumps(vocab, option=orjson.OPT_INDENT_2))
    return len(lines)


def _image_line(im: dict, pos: int, anns: list[dict], class_token: dict, noise_token: int, *, n_bins: int,
                order: str, seed: int, noise) -> dict:
    """One line of ``tokens.jsonl``: image ``im`` (at position ``pos``) with its non-crowd annotations ``anns``
    (arguments as :func:`write_tokens`; ``class_token`` maps category id -> token; the end token follows
    ``noise_token``)."""
    end_token = noise_token + 1
    bbox = np.array([a["bbox"] for a in anns], dtype=np.float64).reshape(-1, 4)
    xyxy = bbox.copy()
    xyxy[:, 2:] += bbox[:, :2]
    rng = None
    if order == "random":
        k = image_index(im, pos)
        rng = stream(seed, k, ORDER_STREAM)
    perm = object_order(xyxy, order, rng=rng)
    cat_ids = [a["category_id"] for a in anns]
    if callable(noise):
        value = noise(image_index(im, pos), xyxy, np.array(cat_ids, dtype=np.int64), (im["width"], im["height"]))
    else:
        value = None if noise is None else noise.get(im["id"])
    nboxes, nlabels = _noise_objects(value, cat_ids, im["id"])
    tokens, weights = encode_objects(
        xyxy[perm],
        [class_token[anns[i]["category_id"]] for i in perm],
        im["width"],
        im["height"],
        n_bins,
        end_token=end_token,
        noise_boxes=nboxes,
        noise_token=noise_token,
    )
    line = {
        "image_id": im["id"],
        "file_name": im["file_name"],
        "width": im["width"],
        "height": im["height"],
        "n_objects": len(anns),
        "n_noise": 0 if nboxes is None else int(nboxes.shape[0]),
        "annotation_ids": [anns[i]["id"] for i in perm],
        "noise_labels": nlabels,
        "tokens": tokens,
        "weights": weights,
    }
    return line


def _noise_objects(value, cat_ids: list[int], image_id) -> tuple[np.ndarray | None, list[int]]:
    """(boxes (M, 4), labels) of one image's noise value (see :func:`write_tokens`)."""
    if value is None:
        return None, []
    if hasattr(value, "boxes") and hasattr(value, "is_noise"):
        sel = np.asarray(value.is_noise, dtype=bool)
        boxes = as_boxes(np.asarray(value.boxes)[sel])
        source = getattr(value, "source", None)
        src = np.full(int(sel.sum()), -1) if source is None else np.asarray(source)[sel]
        labels = [cat_ids[s] if 0 <= s < len(cat_ids) else -1 for s in src.tolist()]
        return boxes, labels
    boxes, labels = value
    boxes = as_boxes(boxes)
    labels = [int(v) for v in np.asarray(labels).reshape(-1)] if labels is not None else []
    if labels and len(labels) != boxes.shape[0]:
        raise ValueError(f"image {image_id}: {boxes.shape[0]} noise boxes but {len(labels)} labels")
    return boxes, labels


def read_vocabulary(path) -> dict:
    """Read a token vocabulary file; raises InputFileError when it is malformed."""
    path = Path(path)
    raw = read_input(path)
    try:
        vocab = orjson.loads(raw)
    except orjson.JSONDecodeError as e:
        raise bad_record(path, f"line {e.lineno}, column {e.colno}", "must be valid JSON", e.msg) from None
    if not isinstance(vocab, dict):
        raise bad_record(path, "top level", "must be a JSON object", type(vocab).__name__)
    for key in ("n_bins", "ranges", "classes"):
        if key not in vocab:
            raise bad_record(path, "top level", f"must have '{key}'", None)
    if not is_int(vocab["n_bins"]) or vocab["n_bins"] < 1:
        raise bad_record(path, "n_bins", "must be a positive whole number", vocab["n_bins"])
    ranges = vocab["ranges"]
    for key in ("noise", "end"):
        r = ranges.get(key) if isinstance(ranges, dict) else None
        if not (isinstance(r, list) and len(r) == 2 and all(is_int(v) for v in r)):
            raise bad_record(path, f"ranges.{key}", "must be [first, last] token ids", r)
    classes = vocab["classes"]
    ok = isinstance(classes, list) and all(
        isinstance(c, dict) and is_int(c.get("token")) and is_int(c.get("category_id"))
        for c in classes
    )
    if not ok:
        raise bad_record(path, "classes", "must be a list of {token, category_id, name}", classes)
    return vocab


def parse_tokens(path, vocab_path) -> tuple[list[dict], list]:
    """Decode a token file line by line, keeping every good line and every problem.

    Parameters
    ----------
    path, vocab_path : str or Path

    Returns
    -------
    lines : list of dict
        One per good line: the line's fields plus ``line_number`` (1-based),
        ``boxes`` (float64
        (N + M, 4), xyxy bin centres in pixels), ``category_ids`` (int64
        (N + M,), -1 for noise objects) and ``is_noise`` (bool (N + M,)), in
        sequence order.
    problems : list of synthgen.errors.InputFileError
        One per bad line, naming the line, the rule and the offending value
        (the token itself for a token outside the vocabulary); each carries
        ``image_id`` (the line's, or None when it has none).

    Raises
    ------
    synthgen.errors.InputFileError
        When the token file cannot be read or the vocabulary is malformed.
    """
    path = Path(path)
    vocab = read_vocabulary(vocab_path)
    raw = read_input(path)
    out, problems = [], []
    for n, text in enumerate(raw.splitlines(), start=1):
        if not text.strip():
            continue
        try:
            line = orjson.loads(text)
        except orjson.JSONDecodeError as e:
            err = bad_record(path, f"line {n}", "must be valid JSON", e.msg)
            err.image_id = None
            problems.append(err)
            continue
        found = _line_problem(line, vocab)
        if found is not None:
            err = bad_record(path, f"line {n}", *found)
            err.image_id = line.get("image_id") if isinstance(line, dict) else None
            problems.append(err)
            continue
        line["line_number"] = n
        out.append(_decode_line(line, vocab))
    return out, problems


def _line_problem(line, vocab: dict) -> tuple[str, object] | None:
    """(rule, value) of the first rule a parsed token line breaks, or None."""
    n_bins = vocab["n_bins"]
    noise_token = vocab["ranges"]["noise"][0]
    end_token = vocab["ranges"]["end"][0]
    classes = {c["token"] for c in vocab["classes"]}
    if not isinstance(line, dict) or not isinstance(line.get("tokens"), list):
        return "must be an object with a 'tokens' list", type(line).__name__
    for key in ("width", "height"):
        if not is_int(line.get(key)) or line[key] <= 0:
            return f"'{key}' must be a positive whole number", line.get(key)
    tokens = line["tokens"]
    bad = [t for t in tokens if not is_int(t)]
    if bad:
        return "tokens must be integers", bad[:5]
    top = max(end_token, noise_token, *classes, n_bins - 1)
    outside = [t for t in tokens if not 0 <= t <= top]
    if outside:
        return f"tokens must be in the vocabulary [0, {top}]", outside[:5]
    if (len(tokens) - 1) % 5 or not tokens:
        return f"must be 5 tokens per object then the end token {end_token} (a length of 5 k + 1)", len(tokens)
    if tokens[-1] != end_token:
        return f"must end with the end token {end_token}", tokens[-1]
    q = np.array(tokens[:-1], dtype=np.int64).reshape(-1, 5)
    coords, cls = q[:, :4], q[:, 4]
    wrong = coords[(coords < 0) | (coords >= n_bins)]
    if wrong.size:
        return f"coordinate tokens must be in [0, {n_bins - 1}]", wrong.tolist()[:5]
    known = np.array([t in classes or t == noise_token for t in cls.tolist()], dtype=bool)
    if not known.all():
        return "class tokens must be a class or the noise token", cls[~known].tolist()[:5]
    return None


def _decode_line(line: dict, vocab: dict) -> dict:
    """A checked token line with its boxes, category ids and noise flags added."""
    n_bins = vocab["n_bins"]
    category_of = {c["token"]: c["category_id"] for c in vocab["classes"]}
    q = np.array(line["tokens"][:-1], dtype=np.int64).reshape(-1, 5)
    coords, cls = q[:, :4], q[:, 4]
    boxes = np.empty(coords.shape, dtype=np.float64)
    boxes[:, 0::2] = dequantize(coords[:, 0::2], line["width"], n_bins)
    boxes[:, 1::2] = dequantize(coords[:, 1::2], line["height"], n_bins)
    line["boxes"] = boxes
    line["category_ids"] = np.array([category_of.get(t, -1) for t in cls.tolist()], dtype=np.int64)
    line["is_noise"] = cls == vocab["ranges"]["noise"][0]
    return line


def read_tokens(path, vocab_path) -> list[dict]:
    """Decode a token file back to boxes.

    Parameters
    ----------
    path, vocab_path : str or Path

    Returns
    -------
    list of dict, one per line
        As :func:`parse_tokens` returns them.

    Raises
    ------
    synthgen.errors.InputFileError
        When a line is not JSON, or its tokens break the vocabulary (a
        coordinate token in a class slot, a missing end token, ...): the
        first such line (see :func:`parse_tokens` for all of them).
    """
    lines, problems = parse_tokens(path, vocab_path)
    if problems:
        raise problems[0]
    return lines


# --------------------------------------------------------------------------- check rule (synthgen check)


def check_tokens(ctx: CheckContext) -> bool:
    """Check rule of tokens: ``tokens.jsonl`` (and ``tokens.<split>.jsonl``) with ``tokens.vocab.json``;
    True when found.

    The vocabulary's classes are the reference's categories by id; each image has
    one line, with the reference's size, and its objects (dequantized, within a
    bin) are the reference's without its ignore regions.
    """
    if not (ctx.root / TOKENS).is_file():
        return False
    vocab = ctx.root / TOKENS_VOCAB
    _check_tokens_file(ctx, ctx.root / TOKENS, vocab, reference=True)
    for p in sorted(ctx.root.glob("tokens.*.jsonl")):
        _check_tokens_file(ctx, p, vocab, reference=False)
    return True


def _check_tokens_file(ctx: CheckContext, path: Path, vocab_path: Path, *, reference: bool) -> None:
    if not vocab_path.is_file():
        ctx.add(vocab_path, "", "token vocabulary file must exist", "<missing>")
        return
    try:
        vocab = read_vocabulary(vocab_path)
        lines, bad = parse_tokens(path, vocab_path)
    except InputFileError as e:
        ctx.add_error(e)
        return
    if ctx.ref_names is not None:
        names = [c.get("name") for c in vocab["classes"]]
        if names != ctx.ref_names:
            ctx.add(vocab_path, "classes", "must be the categories of annotations.json by id", names)
    seen, n_obj = set(), 0
    for e in bad:  # every bad line on its own; its image is not reported missing as well
        ctx.add_error(e)
        stem = ctx.ref_ids.get(e.image_id) if is_int(e.image_id) else None
        if stem is not None:
            seen.add(stem)
    n_bins = vocab["n_bins"]
    for line in lines:
        record = f"line {line['line_number']}"
        real = ~line["is_noise"]
        n_obj += int(real.sum())
        stem = ctx.ref_ids.get(line.get("image_id"))
        if ctx.ref_objects is not None and stem is None:
            ctx.add(path, record, "image_id must name an image of annotations.json", line.get("image_id"))
            continue
        if stem is None:
            continue
        if stem in seen:
            ctx.add(path, record, "each image must have one line", line.get("image_id"))
        seen.add(stem)
        width, height = line["width"], line["height"]
        names = [ctx.ref_cat_names.get(c) for c in line["category_ids"][real].tolist()]
        found = [(f"object {j}", names[j], tuple(b)) for j, b in enumerate(line["boxes"][real].tolist())]
        # a dequantized coordinate is within half a bin of the true one
        ctx.compare("tokens", path, stem, found, record=record, tol=max(width, height) / n_bins, crowd=False)
        if (width, height) != ctx.ref_sizes[stem]:
            ctx.add(path, record, f"width, height must match annotations.json {ctx.ref_sizes[stem]}", (width, height))
    if reference:
        ctx.missing("tokens", seen, ctx.rel(path) + " (image {stem})")
        ctx.count("tokens", 1, len(lines) + len(bad), n_obj)
        ctx.compare_total("tokens", path)

