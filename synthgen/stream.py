"""Scenes on the fly for training loops: the images ``make`` would write, with fresh token order and noise per epoch.

:class:`SceneStream` is a map-style dataset over a config: ``stream[k]``
renders image ``k`` of the run exactly as ``synthgen make`` renders it (same
pixels as the PNG it writes, same boxes as its COCO annotations) and returns
``(image, target)``.  With a :class:`TokenSpec` the target also holds the
object sequence for a sequence-style detector (the rule of
:mod:`synthgen.formats.tokens`), in an order and with noise objects that
change with the epoch.

Determinism
-----------
Item ``k`` of epoch ``e`` is a pure function of ``(config, seed, e, k)``:

* the scene comes from image ``k``'s own stream,
  ``SeedSequence(seed, spawn_key=(k,))`` (:func:`synthgen.scene.image_rng`),
  which the epoch never touches, so ``set_epoch`` never changes an image;
* the object order and the noise objects come from
  ``SeedSequence(seed, spawn_key=(k, EPOCH_STREAM, e))``, whose two spawned
  children draw the order and the noise respectively.

No state is carried from one item to the next, so any number of loader
workers, any sampler order and any resume point give the same items.

Torch
-----
No part of synthgen imports torch.  A :class:`SceneStream` works as a
map-style dataset in a ``torch.utils.data.DataLoader`` as it is (it has
``__len__`` and ``__getitem__``; give ``collate_fn=list`` since boxes vary in
number).  :class:`SceneIterable` is the iterable form for infinite streams:
each loader worker takes every ``n``-th block of ``block`` consecutive items,
so with ``block`` equal to the loader's batch size the loader's round-robin
over workers yields the items in index order, whatever the worker count.
It asks torch which worker it runs in only when torch is already imported.
"""

from __future__ import annotations

import itertools
import sys
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path

import numpy as np

# Every name this module takes from the rest of synthgen, in one place.
from synthgen.config import Config, load_config
from synthgen.errors import check_number
from synthgen.formats.tokens import check_token_options, encode_objects, object_order, vocabulary
from synthgen.jitter import pad_with_noise
from synthgen.run.finish import categories
from synthgen.scene import render_scene
from synthgen.seeding import EPOCH_STREAM

__all__ = ["EPOCH_STREAM", "TokenSpec", "SceneStream", "SceneIterable", "loader_worker", "full_masks"]


@dataclass(frozen=True, slots=True)
class TokenSpec:
    """How to turn a scene's objects into a token sequence.

    Attributes
    ----------
    bins : int
        Coordinate bins per axis (:func:`synthgen.formats.tokens.quantize`).
    order : {"random", "raster", "area", "distance"}
        Object order; ``random`` draws a new permutation per epoch.
    pad_to : int or None
        Pad every sequence with noise objects to this many objects (never
        fewer than the image's objects); None adds no noise.  The sequence
        has ``5 * max(N, pad_to) + 1`` tokens, a fixed length when
        ``pad_to`` is at least the most objects an image can hold.
    jittered : float
        Share in [0, 1] of the noise objects made by jittering a true box;
        the rest are random boxes (see :func:`synthgen.jitter.pad_with_noise`).
    """

    bins: int = 1000
    order: str = "random"
    pad_to: int | None = None
    jittered: float = 0.5

    def __post_init__(self):
        check_token_options(self.bins, self.order)
        if self.pad_to is not None:
            check_number("tokens.pad_to", self.pad_to, lo=0, integer=True)
        check_number("tokens.jittered", self.jittered, lo=0, hi=1)


def full_masks(scene_masks, height: int, width: int) -> np.ndarray:
    """Canvas-sized masks from a scene's mask patches.

    Parameters
    ----------
    scene_masks : sequence of (row0, col0, ndarray of bool (h, w))
        As :attr:`synthgen.scene.Scene.masks`.
    height, width : int

    Returns
    -------
    ndarray of bool, shape (N, height, width)

    Examples
    --------
    >>> full_masks([(1, 2, np.ones((2, 3), bool))], 4, 6).sum(axis=(1, 2)).tolist()
    [6]
    """
    out = np.zeros((len(scene_masks), height, width), dtype=bool)
    for i, (r0, c0, patch) in enumerate(scene_masks):
        out[i, r0 : r0 + patch.shape[0], c0 : c0 + patch.shape[1]] = patch
    return out


class SceneStream:
    """Map-style dataset of the scenes of a config, with per-epoch token order and noise objects.

    Parameters
    ----------
    config : Config, or path of a TOML config
        The run; ``len(stream) == config.count``.
    epoch : int
        Epoch whose order and noise :meth:`__getitem__` uses (see :meth:`set_epoch`).
    tokens : TokenSpec, optional
        Add the token sequence to every target.
    masks : bool
        Add canvas-sized instance masks to every target.

    ``stream[k]`` returns ``(image, target)``: ``image`` uint8 (H, W, 3), the
    pixels ``make`` writes for image ``k`` (before any JPEG encoding), and
    ``target`` a dict:

    ==================  =====================================================
    ``image_id``        ``k + 1``, the COCO image id ``make`` gives it
    ``index``, ``epoch``
    ``boxes``           float64 (N, 4), annotated boxes, xyxy pixels
    ``labels``          int64 (N,), COCO category ids
    ``areas``           float64 (N,), visible area, px^2
    ``ignore_boxes``    float64 (M, 4), ignore regions (COCO ``iscrowd`` 1)
    ``facts``           tuple of N dicts, the per-object facts
    ``masks``           bool (N, H, W), with ``masks=True``
    ``tokens``          int64 (L,), with ``tokens``: the sequence
    ``weights``         float32 (L,): 0 on noise objects' coordinates, else 1
    ``order``           int64 (N,): object ``order[i]`` is the i-th in the sequence
    ``noise_boxes``     float64 (K, 4): the noise objects, in sequence order
    ==================  =====================================================

    Examples
    --------
    >>> from synthgen.config import load_config
    >>> cfg = load_config(overrides=["canvas.width=64", "canvas.height=48", "count=3", "objects.count=[2,2]"])
    >>> stream = SceneStream(cfg, tokens=TokenSpec(bins=16, pad_to=4))
    >>> image, target = stream[1]
    >>> len(stream), image.shape, target["tokens"].shape
    (3, (48, 64, 3), (21,))
    """

    def __init__(self, config: Config | str | Path, *, epoch: int = 0, tokens: TokenSpec | None = None,
                 masks: bool = False):
        self.config = config if isinstance(config, Config) else load_config(Path(config))
        self.tokens = tokens
        self.masks = bool(masks)
        self.epoch = 0
        self.set_epoch(epoch)
        cats = categories(self.config)
        self.vocab = None
        if tokens is not None:
            size = (self.config.canvas.width, self.config.canvas.height)
            self.vocab = vocabulary(cats, tokens.bins, size, order=tokens.order, seed=self.config.seed)
            self.vocab["random_order_stream"] = (
                f"SeedSequence(seed, spawn_key=(image_index, {EPOCH_STREAM}, epoch)).spawn(2)[0]"
            )

    def set_epoch(self, epoch: int) -> None:
        """Use ``epoch``'s object order and noise objects from now on; the images stay the same.

        With a torch ``DataLoader``, call it before each epoch's iteration
        (workers get a copy of the dataset when the iteration starts, unless
        ``persistent_workers=True``).
        """
        check_number("epoch", epoch, lo=0, integer=True)
        self.epoch = int(epoch)

    def __len__(self) -> int:
        return self.config.count

    def __getitem__(self, k: int):
        n = len(self)
        if not isinstance(k, (int, np.integer)) or isinstance(k, bool):
            raise TypeError(f"item index must be an integer (got {type(k).__name__})")
        if not -n <= k < n:
            raise IndexError(f"item {k} is outside the stream of {n} images")
        return self.item(int(k) % n, self.epoch)

    def __iter__(self) -> Iterator:
        return (self.item(k, self.epoch) for k in range(len(self)))

    def item(self, k: int, epoch: int):
        """``(image, target)`` of image ``k`` in ``epoch``; any ``k >= 0`` (past ``len`` too) is a scene of the run."""
        scene = render_scene(self.config, k)
        h, w = scene.image.shape[:2]
        target = {
            "image_id": k + 1,
            "index": k,
            "epoch": epoch,
            "boxes": scene.boxes,
            "labels": scene.categories,
            "areas": scene.areas,
            "ignore_boxes": scene.ignored.boxes,
            "facts": scene.facts,
        }
        if self.masks:
            target["masks"] = full_masks(scene.masks, h, w)
        if self.tokens is not None:
            target.update(self._sequence(scene.boxes, scene.categories, k, epoch, (w, h)))
        return scene.image, target

    def _sequence(self, boxes: np.ndarray, labels: np.ndarray, k: int, epoch: int, size) -> dict:
        """Token sequence, weights, order and noise boxes of one item (the epoch's own draws)."""
        spec, vocab = self.tokens, self.vocab
        ss = np.random.SeedSequence(self.config.seed, spawn_key=(k, EPOCH_STREAM, epoch))
        order_rng, noise_rng = (np.random.Generator(np.random.PCG64(s)) for s in ss.spawn(2))
        perm = object_order(boxes, spec.order, rng=order_rng)
        noise = np.zeros((0, 4))
        if spec.pad_to is not None and spec.pad_to > len(boxes):
            padded = pad_with_noise(boxes, labels, spec.pad_to, rng=noise_rng, canvas=size, noise_label=-1,
                                    jittered=spec.jittered)
            noise = padded.boxes[padded.is_noise]
        class_token = {c["category_id"]: c["token"] for c in vocab["classes"]}
        tokens, weights = encode_objects(
            boxes[perm], [class_token[c] for c in labels[perm].tolist()], size[0], size[1], spec.bins,
            end_token=vocab["ranges"]["end"][0], noise_boxes=noise, noise_token=vocab["ranges"]["noise"][0],
        )
        return {
            "tokens": np.asarray(tokens, dtype=np.int64),
            "weights": np.asarray(weights, dtype=np.float32),
            "order": perm,
            "noise_boxes": noise,
        }

    def iterable(self, *, start: int = 0, stop: int | None = None, block: int = 1) -> SceneIterable:
        """Items ``start, start + 1, ...`` (endless when ``stop`` is None) as a :class:`SceneIterable`."""
        return SceneIterable(self, start=start, stop=stop, block=block)


def loader_worker() -> tuple[int, int]:
    """``(worker id, number of workers)`` of the torch loader worker this runs in; ``(0, 1)`` outside one.

    Never imports torch: outside a process that already did, there is no loader.
    """
    torch = sys.modules.get("torch")
    data = getattr(getattr(torch, "utils", None), "data", None)
    info = data.get_worker_info() if data is not None else None
    return (0, 1) if info is None else (int(info.id), int(info.num_workers))


class SceneIterable:
    """Items of a :class:`SceneStream` as an iterator, split between loader workers by blocks.

    Parameters
    ----------
    stream : SceneStream
        Gives the items and the epoch (read when iteration starts).
    start, stop : int
        Item range ``[start, stop)``; ``stop=None`` never ends (images past
        ``config.count`` are further scenes of the same run).
    block : int
        Items per block.  Worker ``w`` of ``n`` yields the blocks ``j`` with
        ``j % n == w``, in order; so interleaving the workers block by block
        (what a torch ``DataLoader`` does with ``batch_size=block``) gives
        ``start, start + 1, ...`` for any ``n``.

    Examples
    --------
    >>> from synthgen.config import load_config
    >>> s = SceneStream(load_config(overrides=["canvas.width=32", "canvas.height=32", "count=4"]))
    >>> [t["index"] for _, t in s.iterable(stop=6, block=2).shard(1, 2)]
    [2, 3]
    """

    def __init__(self, stream: SceneStream, *, start: int = 0, stop: int | None = None, block: int = 1):
        check_number("start", start, lo=0, integer=True)
        if stop is not None:
            check_number("stop", stop, lo=start, integer=True)
        check_number("block", block, lo=1, integer=True)
        self.stream, self.start, self.stop, self.block = stream, int(start), stop, int(block)

    def indices(self, worker: int, workers: int) -> Iterator[int]:
        """Item indices worker ``worker`` of ``workers`` yields, in order."""
        if not 0 <= worker < workers:
            raise ValueError(f"worker must be in [0, {workers}) (got {worker})")
        for j in itertools.count(worker, workers):
            lo = self.start + j * self.block
            hi = lo + self.block if self.stop is None else min(lo + self.block, self.stop)
            if hi <= lo:
                return
            yield from range(lo, hi)

    def shard(self, worker: int, workers: int) -> Iterator:
        """The items of worker ``worker`` of ``workers``."""
        epoch = self.stream.epoch
        return (self.stream.item(k, epoch) for k in self.indices(worker, workers))

    def __iter__(self) -> Iterator:
        return self.shard(*loader_worker())
