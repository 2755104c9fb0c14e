"""Boxes that are wrong by a known amount, and the simulated detector built from them.

Modules
-------
* :mod:`synthgen.jitter.models`: the perturbation models and the simulated detector.
* :mod:`synthgen.jitter.coco`: simulated detections for a COCO dataset (the library side of ``synthgen jitter``).

The public names below are importable from ``synthgen.jitter`` itself.
"""

from synthgen.jitter.models import *  # noqa: F403
from synthgen.jitter.models import __all__ as _models_all

__all__ = list(_models_all)
