"""Detector specs: the text after ``--detector``, parsed and loaded.

Forms
-----
``builtin``
    The reference detector of :mod:`synthgen.probe.builtin`.
``module:function`` or ``path/to/file.py:function``
    A Python callable taking a list of images, each ``(H, W, 3)`` uint8 RGB,
    and returning one result per image (:mod:`synthgen.probe.contract`).
``results:DIR`` (or ``results:FILE.json`` for one dataset)
    Precomputed COCO results files, one per subset at the subset's name plus
    ``.json`` (the layout ``synthgen score --pred-dir`` reads).
``onnx:PATH.onnx`` with optional ``#key=value,...`` settings
    An ONNX model run by onnxruntime on the CPU (:mod:`synthgen.probe.onnx`);
    needs the ``[onnx]`` extra.

Every detector object here pickles as its spec and settings (a callable is
imported again in each worker), so ``--workers`` can run it in other processes.
"""

from __future__ import annotations

import importlib
import importlib.util
import re
import sys
from dataclasses import dataclass, field
from pathlib import Path

from synthgen.errors import UserError

__all__ = ["CallableDetector", "ResultsSource", "parse_detector", "SPEC_FORMS"]

SPEC_FORMS = "builtin, module:function, path/to/file.py:function, results:DIR or onnx:MODEL.onnx"
_MODULE = re.compile(r"^[A-Za-z_]\w*(\.[A-Za-z_]\w*)*$")
_NAME = re.compile(r"^[A-Za-z_]\w*(\.[A-Za-z_]\w*)*$")


def _error(spec: str, rule: str):
    return UserError(f"option '--detector' {rule} (got {spec!r})")


@dataclass
class CallableDetector:
    """A Python callable named by ``module:function`` or ``file.py:function``; loaded on first use.

    Pickles as its names only, so each worker process imports it again.
    """

    spec: str
    module: str | None
    path: str | None
    attr: str
    _fn: object = field(default=None, repr=False, compare=False)

    @property
    def name(self) -> str:
        return self.attr.rsplit(".", 1)[-1]

    @property
    def settings(self) -> dict:
        return {"module": self.module} if self.module else {"path": self.path}

    def load(self):
        """The callable itself; a missing module, file or name is a UserError naming the spec."""
        if self._fn is None:
            if self.path is not None:
                target = _load_file(self.spec, Path(self.path))
            else:
                try:
                    target = importlib.import_module(self.module)
                except ImportError as exc:
                    raise _error(self.spec, f"names a module that cannot be imported ({exc})") from None
            for part in self.attr.split("."):
                if not hasattr(target, part):
                    raise _error(self.spec, f"names {self.attr!r}, which its module does not define")
                target = getattr(target, part)
            if not callable(target):
                raise _error(self.spec, f"names {self.attr!r}, which is not callable")
            self._fn = target
        return self._fn

    def __call__(self, images):
        return self.load()(images)

    def __getstate__(self):
        return {"spec": self.spec, "module": self.module, "path": self.path, "attr": self.attr}

    def __setstate__(self, state):
        self.__init__(**state)


def _load_file(spec: str, path: Path):
    if not path.is_file():
        raise _error(spec, f"names a file that does not exist ({path})")
    name = "_synthgen_detector_" + re.sub(r"\W", "_", str(path))
    if name in sys.modules:
        return sys.modules[name]
    loader_spec = importlib.util.spec_from_file_location(name, path)
    module = importlib.util.module_from_spec(loader_spec)
    sys.modules[name] = module
    try:
        loader_spec.loader.exec_module(module)
    except Exception as exc:
        del sys.modules[name]
        raise _error(spec, f"names a file that fails on import ({type(exc).__name__}: {exc})") from None
    return module


@dataclass(frozen=True)
class ResultsSource:
    """``results:DIR``: one COCO results file per subset, computed elsewhere."""

    spec: str
    path: Path

    name = "results"

    @property
    def settings(self) -> dict:
        return {"path": str(self.path)}

    def file_for(self, subset: str, single: bool) -> Path:
        """The results file of a subset: ``DIR/<subset>.json``, or the file itself for one dataset."""
        if self.path.is_file() and single:
            return self.path
        return self.path / (subset + ".json")


def parse_detector(spec: str):
    """Parse a ``--detector`` value into a detector object (or a :class:`ResultsSource`).

    Raises
    ------
    UserError
        Naming ``--detector``, the rule and the value, for text of no known
        form, a file or module that is missing, or a name it does not define.

    Examples
    --------
    >>> parse_detector("math:prod").name
    'prod'
    >>> parse_detector("builtin").settings["min_contrast"]
    0.06
    """
    spec = spec.strip()
    if spec == "builtin":
        from synthgen.probe.builtin import BuiltinDetector

        return BuiltinDetector()
    head, sep, rest = spec.partition(":")
    if head == "results" and sep:
        if not rest:
            raise _error(spec, "needs a directory after 'results:'")
        path = Path(rest)
        if not path.exists():
            raise _error(spec, "names a results directory or file that does not exist")
        return ResultsSource(spec=spec, path=path)
    if head == "onnx" and sep:
        from synthgen.probe.onnx import OnnxDetector

        return OnnxDetector.parse(spec, rest)
    target, sep, attr = spec.rpartition(":")
    if not sep or not target or not _NAME.match(attr):
        raise _error(spec, f"must be one of {SPEC_FORMS}")
    if target.endswith(".py"):
        detector = CallableDetector(spec=spec, module=None, path=str(Path(target).resolve()), attr=attr)
    elif _MODULE.match(target):
        detector = CallableDetector(spec=spec, module=target, path=None, attr=attr)
    else:
        raise _error(spec, f"must be one of {SPEC_FORMS}")
    detector.load()
    return detector
