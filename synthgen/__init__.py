"""synthgen: object-detection test data whose right answer is known exactly.

Coordinate conventions are stated once, in :mod:`synthgen.geometry`.  The main
entry points are importable from the package itself (loaded on first use, so
``import synthgen`` stays light)::

    from synthgen import load_config, render_scene, make_dataset, evaluate, simulate_detections
"""

from synthgen._lazy import lazy_exports

__version__ = "0.1.0"
#: The name on the package index (``pip install synthgen-shapes``); the import package and the
#: command are ``synthgen``.  Another, unrelated project is published as ``synthgen``.
DISTRIBUTION = "synthgen-shapes"

#: public name -> module that defines it
_EXPORTS = {
    "load_config": "synthgen.config",
    "Config": "synthgen.config",
    "render_scene": "synthgen.scene",
    "compose": "synthgen.scene",
    "compose_shapes": "synthgen.scene",
    "Scene": "synthgen.scene.annotate",
    "Shape": "synthgen.scene.shapes",
    "make_dataset": "synthgen.run.make",
    "merge_shards": "synthgen.run.merge",
    "evaluate": "synthgen.evaluate",
    "simulate_detections": "synthgen.jitter",
    "DetectorSpec": "synthgen.jitter",
    "to_iou": "synthgen.jitter",
    "jitter_dataset": "synthgen.jitter.coco",
    "check_dataset": "synthgen.formats.check",
    "export": "synthgen.formats",
    "run_sweep": "synthgen.run.sweep",
    "pairwise_iou": "synthgen.geometry",
    "UserError": "synthgen.errors",
}

__all__ = ["__version__", *_EXPORTS]


__getattr__, __dir__ = lazy_exports(__name__, _EXPORTS, also=("__version__",))
