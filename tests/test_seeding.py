"""Random stream keys: one table, distinct keys, the generators numpy's SeedSequence defines."""

from __future__ import annotations

import numpy as np

from synthgen import seeding


def test_stream_is_the_seed_sequence_generator():
    """stream(seed, *key) draws what Generator(PCG64(SeedSequence(seed, spawn_key=key))) draws (numpy docs)."""
    want = np.random.Generator(np.random.PCG64(np.random.SeedSequence(9, spawn_key=(4, seeding.ORDER_STREAM))))
    assert np.array_equal(seeding.stream(9, 4, seeding.ORDER_STREAM).random(5), want.random(5))


def test_image_stream_differs_from_its_neighbours():
    """Image k's stream is spawn_key (k,): different from image k+1's and from (k, ORDER_STREAM)."""
    a = seeding.image_rng(3, 7).random(3)
    assert not np.array_equal(a, seeding.image_rng(3, 8).random(3))
    assert not np.array_equal(a, seeding.stream(3, 7, seeding.ORDER_STREAM).random(3))


def test_stream_keys_are_distinct_and_named_once():
    """No two named streams share a key, and the stages are the four the composer spawns."""
    keys = list(seeding.STREAM_KEYS.values())
    assert len(set(keys)) == len(keys)
    assert seeding.STAGE_NAMES == ("background", "objects", "clutter", "degrade")
    assert seeding.STAGES == 4


def test_modules_use_the_table():
    """The modules that draw from a named stream take its key from synthgen.seeding."""
    from synthgen import jitter, scene, stream
    from synthgen.formats import splits, tokens
    from synthgen.jitter import coco as jitter_coco

    assert tokens.ORDER_STREAM is seeding.ORDER_STREAM
    assert splits.SPLIT_STREAM is seeding.SPLIT_STREAM
    assert jitter.NOISE_STREAM is seeding.NOISE_STREAM
    assert jitter_coco.JITTER_STREAM is seeding.JITTER_STREAM
    assert scene.image_rng is seeding.image_rng
    assert stream.EPOCH_STREAM is seeding.EPOCH_STREAM
