"""Boxes that are wrong by a known amount, and the simulated detector built from them.

Everything here is a pure function over float64 box arrays of shape
``(N, 4)`` in the xyxy convention of :mod:`synthgen.geometry` (half-open,
continuous pixel coordinates).  Every random function takes a keyword-only
``rng: numpy.random.Generator``; no global random state is used.

Modules
-------
* :mod:`synthgen.jitter.iou`: the exact-IoU solver (:func:`box_at_iou`) and the COCO threshold margin.
* :mod:`synthgen.jitter.models`: perturbation models, duplicates, distractors, class confusion.
* :mod:`synthgen.jitter.noise`: training noise objects (:func:`pad_with_noise`, :func:`noise_padder`).
* :mod:`synthgen.jitter.detector`: the simulated detector (:class:`DetectorSpec`, :func:`simulate_detections`).
* :mod:`synthgen.jitter.coco`: simulated detections for a COCO dataset, the library side of ``synthgen jitter``.

The public names of the first four are importable from ``synthgen.jitter`` itself.
"""

from synthgen.jitter.detector import *  # noqa: F403
from synthgen.jitter.detector import __all__ as _detector
from synthgen.jitter.iou import *  # noqa: F403
from synthgen.jitter.iou import __all__ as _iou
from synthgen.jitter.models import *  # noqa: F403
from synthgen.jitter.models import __all__ as _models
from synthgen.jitter.noise import *  # noqa: F403
from synthgen.jitter.noise import __all__ as _noise

__all__ = [*_iou, *_models, *_noise, *_detector]
