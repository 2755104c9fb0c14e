"""Shared fixtures: small configs and datasets made once per test session."""

from __future__ import annotations

import pytest

from synthgen.config import load_config
from synthgen.run.make import make_dataset

SMALL = [
    "count=6",
    "seed=11",
    "canvas.width=160",
    "canvas.height=120",
    "objects.count=[3, 9]",
    "objects.size=[4, 60]",
]


@pytest.fixture(scope="session")
def small_config():
    """A quick config: six 160x120 images of 3 to 9 objects."""
    return load_config(overrides=SMALL)


@pytest.fixture(scope="session")
def small_dataset(tmp_path_factory, small_config):
    """A dataset written once from ``small_config``: (directory, config)."""
    out = tmp_path_factory.mktemp("small") / "ds"
    make_dataset(small_config, out, workers=1)
    return out, small_config


@pytest.fixture
def pool_always(monkeypatch):
    """Worker processes even for a handful of images (runs this small normally render in process)."""
    import synthgen.run.backends

    monkeypatch.setattr(synthgen.run.backends, "MIN_IMAGES_PER_WORKER", 1)
