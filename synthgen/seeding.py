"""Random streams: every ``spawn_key`` synthgen draws from, in one table.

All randomness of a run comes from its root ``seed`` through numpy's
``SeedSequence(seed, spawn_key=KEY)``: streams with different keys are
independent, and none depends on worker count, shard split or order.  The keys:

* image ``k``: ``(k,)``, the scene of image k; :func:`~synthgen.scene.compose` spawns
  :data:`STAGES` children of it, one per stage (:data:`STAGE_NAMES`), so one stage's
  draws never move another's;
* token order of image ``k``: ``(k, ORDER_STREAM)``, the random object order of its token line;
* training noise of image ``k``: ``(k, NOISE_STREAM)``, the noise objects added to its tokens;
* epoch ``e`` of a scene stream, item ``k``: ``(k, EPOCH_STREAM, e)``, the token order and noise
  objects :class:`synthgen.stream.SceneStream` draws afresh each epoch;
* jitter: ``(JITTER_STREAM,)``, the simulated detections of a whole dataset;
* split: ``(SPLIT_STREAM,)``, the draw that assigns images to splits.

:data:`NOISE_BANK_SEED` is the root of the fixed bank of normal values that sensor
noise samples from (the same in every process and run, whatever the run's seed).

The two-element keys of a stream beside image k are a child of nothing: numpy
derives each key's entropy independently, so ``(k, ORDER_STREAM)`` does not
overlap ``(k,)`` or its spawned children.  The one-element keys are chosen far
above the image indices a run uses (at most ``config.MAX_IMAGES``) where they
can be; :data:`SPLIT_STREAM` predates that rule and equals image 7,565,420's key
(kept: changing it would change every split ever written).
"""

from __future__ import annotations

import numpy as np

__all__ = [
    "STAGES",
    "STAGE_NAMES",
    "ORDER_STREAM",
    "NOISE_STREAM",
    "EPOCH_STREAM",
    "JITTER_STREAM",
    "SPLIT_STREAM",
    "NOISE_BANK_SEED",
    "STREAM_KEYS",
    "stream",
    "image_rng",
]

#: The stages :func:`synthgen.scene.compose` spawns a child generator for, in spawn order.
STAGE_NAMES = ("background", "objects", "clutter", "degrade")
#: Number of child generators spawned from an image's generator.
STAGES = len(STAGE_NAMES)
#: ``spawn_key`` tail of image k's token-order stream ``(k, ORDER_STREAM)`` (the bytes of "tok").
ORDER_STREAM = 0x746F6B
#: ``spawn_key`` tail of image k's training-noise stream ``(k, NOISE_STREAM)`` (the bytes of "nois").
NOISE_STREAM = 0x6E6F6973
#: ``spawn_key`` middle of item k's stream in epoch e ``(k, EPOCH_STREAM, e)`` (the bytes of "epoc").
EPOCH_STREAM = 0x65706F63
#: ``spawn_key`` of the jitter stream (the bytes of "jitt").
JITTER_STREAM = 0x6A697474
#: ``spawn_key`` of the split-assignment stream (the bytes of "spl").
SPLIT_STREAM = 0x73706C
#: Root entropy of sensor noise's fixed bank of standard normals.
NOISE_BANK_SEED = 0x5EED_0A15E

#: Every named stream key, by name (a test holds them distinct).
STREAM_KEYS = {
    "ORDER_STREAM": ORDER_STREAM,
    "NOISE_STREAM": NOISE_STREAM,
    "EPOCH_STREAM": EPOCH_STREAM,
    "JITTER_STREAM": JITTER_STREAM,
    "SPLIT_STREAM": SPLIT_STREAM,
    "NOISE_BANK_SEED": NOISE_BANK_SEED,
}


def stream(seed: int, *key: int) -> np.random.Generator:
    """The generator ``Generator(PCG64(SeedSequence(seed, spawn_key=key)))``.

    Examples
    --------
    >>> a, b = stream(3, 0, ORDER_STREAM).random(), stream(3, 0, ORDER_STREAM).random()
    >>> a == b
    True
    """
    return np.random.Generator(np.random.PCG64(np.random.SeedSequence(int(seed), spawn_key=tuple(key))))


def image_rng(seed: int, index: int) -> np.random.Generator:
    """The generator of image ``index`` of a run with root ``seed``.

    ``SeedSequence(seed, spawn_key=(index,))`` makes every image's stream
    independent of the others, so image ``k`` can be rebuilt alone and results
    do not depend on worker count or order.
    """
    return stream(seed, index)
