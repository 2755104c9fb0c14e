"""ONNX models as detectors (``--detector onnx:MODEL.onnx``), run by onnxruntime on the CPU.

Needs the ``[onnx]`` extra (``pip install 'synthgen-shapes[onnx]'``).

The model's layout
------------------
* **Input**: one tensor, ``(1, 3, H, W)`` float32, RGB, values in [0, 1]
  (pixel / 255), channels first.  A model with a fixed ``H x W`` other than
  the image's gets the image resized (bilinear) and its boxes scaled back; a
  dynamic size gets the image as it is.  Images go in one at a time.
* **Outputs**, found by name: ``boxes`` ``(N, 4)`` (or ``(1, N, 4)``) xyxy in
  the input's pixels, ``scores`` ``(N,)`` and ``labels`` ``(N,)`` integer COCO
  category ids of the dataset (or ``(1, N)`` each).

Settings after ``#``, comma-separated: ``input=NAME`` (default: the model's
first input), ``boxes=NAME``, ``scores=NAME``, ``labels=NAME`` (defaults:
those words), e.g. ``onnx:det.onnx#boxes=dets,labels=classes``.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from synthgen.errors import UserError, require_extra

__all__ = ["OnnxDetector"]

_KEYS = ("input", "boxes", "scores", "labels")


class OnnxDetector:
    """An ONNX model behind the detector contract; pickles as its path and settings (a session per process)."""

    def __init__(self, spec: str, path: str, names: dict):
        self.spec = spec
        self.path = path
        self.names = {"input": None, "boxes": "boxes", "scores": "scores", "labels": "labels", **names}
        self._session = None

    name = "onnx"

    @property
    def settings(self) -> dict:
        return {"path": self.path, **self.names}

    @classmethod
    def parse(cls, spec: str, rest: str) -> OnnxDetector:
        """From the text after ``onnx:``; checks the extra, the file and the output names at once."""
        path, _, options = rest.partition("#")
        names = {}
        for part in filter(None, options.split(",")):
            key, sep, value = part.partition("=")
            if not sep or key.strip() not in _KEYS or not value.strip():
                raise UserError(f"option '--detector' settings after '#' must be KEY=NAME with KEY one of "
                                f"{', '.join(_KEYS)} (got {spec!r})")
            names[key.strip()] = value.strip()
        if not path or not Path(path).is_file():
            raise UserError(f"option '--detector' names an ONNX file that does not exist (got {spec!r})")
        require_extra("onnxruntime", "onnx", "option '--detector onnx:...'")
        det = cls(spec, str(Path(path).resolve()), names)
        det._check()
        return det

    def _open(self):
        if self._session is None:
            import onnxruntime

            opts = onnxruntime.SessionOptions()
            opts.log_severity_level = 3
            try:
                self._session = onnxruntime.InferenceSession(self.path, opts, providers=["CPUExecutionProvider"])
            except Exception as exc:
                raise UserError(f"option '--detector': {self.path} cannot be loaded by onnxruntime "
                                            f"({type(exc).__name__}: {str(exc).splitlines()[0]})") from None
        return self._session

    def _check(self) -> None:
        session = self._open()
        outputs = [o.name for o in session.get_outputs()]
        for key in ("boxes", "scores", "labels"):
            if self.names[key] not in outputs:
                raise UserError(
                    f"option '--detector': the model has no output {self.names[key]!r} for {key} "
                    f"(its outputs: {', '.join(outputs)}; set it with #{key}=NAME)")

    def _input(self):
        inputs = self._open().get_inputs()
        if self.names["input"] is None:
            return inputs[0]
        return next(i for i in inputs if i.name == self.names["input"])

    def __call__(self, images) -> list:
        import cv2

        session, inp = self._open(), self._input()
        fixed = inp.shape[2:4] if len(inp.shape) == 4 else [None, None]
        wanted = [self.names[k] for k in ("boxes", "scores", "labels")]
        out = []
        for image in images:
            h, w = image.shape[:2]
            fh, fw = (d if isinstance(d, int) else None for d in fixed)
            pixels = image if (fh in (None, h) and fw in (None, w)) else cv2.resize(
                image, (fw or w, fh or h), interpolation=cv2.INTER_LINEAR)
            tensor = np.ascontiguousarray(pixels.transpose(2, 0, 1)[None], dtype=np.float32) / 255.0
            boxes, scores, labels = session.run(wanted, {inp.name: tensor})
            boxes = np.asarray(boxes, dtype=np.float64).reshape(-1, 4)
            scale = np.array([w / pixels.shape[1], h / pixels.shape[0]] * 2)
            labels = np.asarray(labels).reshape(-1)
            out.append({"boxes": boxes * scale, "scores": np.asarray(scores).reshape(-1),
                        "labels": labels.astype(np.int64) if np.issubdtype(labels.dtype, np.integer) else labels})
        return out

    def __getstate__(self):
        return {"spec": self.spec, "path": self.path, "names": self.names}

    def __setstate__(self, state):
        self.__init__(state["spec"], state["path"], state["names"])
