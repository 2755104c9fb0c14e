"""`--detector onnx:MODEL`: the input layout and output names, on tiny graphs built with the onnx helper API."""

from __future__ import annotations

import pickle
import re

import numpy as np
import pytest

from synthgen.errors import UserError
from synthgen.probe import parse_detector, run_probe

onnx = pytest.importorskip("onnx")
pytest.importorskip("onnxruntime")
from onnx import TensorProto, helper  # noqa: E402

BOXES = [[0.0, 0.0, 4.0, 4.0], [1.0, 1.0, 5.0, 5.0], [2.0, 2.0, 6.0, 6.0]]


def _model(path, *, size=("H", "W"), boxes_name="boxes"):
    """scores = the mean of each input channel (so the test sees layout and scale); boxes and labels constant."""
    nodes = [
        helper.make_node("ReduceMean", ["images"], ["means"], axes=[2, 3], keepdims=0),
        helper.make_node("Constant", [], ["shape3"], value=helper.make_tensor("s", TensorProto.INT64, [1], [3])),
        helper.make_node("Reshape", ["means", "shape3"], ["scores"]),
        helper.make_node("Constant", [], [boxes_name],
                         value=helper.make_tensor("b", TensorProto.FLOAT, [3, 4], np.ravel(BOXES).tolist())),
        helper.make_node("Constant", [], ["labels"], value=helper.make_tensor("l", TensorProto.INT64, [3], [1, 2, 1])),
    ]
    graph = helper.make_graph(
        nodes, "probe-test",
        [helper.make_tensor_value_info("images", TensorProto.FLOAT, [1, 3, *size])],
        [helper.make_tensor_value_info(boxes_name, TensorProto.FLOAT, [3, 4]),
         helper.make_tensor_value_info("scores", TensorProto.FLOAT, [3]),
         helper.make_tensor_value_info("labels", TensorProto.INT64, [3])],
    )
    model = helper.make_model(graph, opset_imports=[helper.make_opsetid("", 13)])
    model.ir_version = 8  # readable by every onnxruntime of the last years
    onnx.save(model, str(path))
    return path


def test_input_is_nchw_rgb_in_unit_range(tmp_path):
    """Channel means of the input tensor equal the image's RGB means / 255: NCHW, RGB order, [0, 1]."""
    det = parse_detector(f"onnx:{_model(tmp_path / 'm.onnx')}")
    image = np.zeros((6, 10, 3), np.uint8)
    image[..., 0], image[..., 1], image[..., 2] = 51, 102, 255
    (out,) = det([image])
    np.testing.assert_allclose(out["scores"], [0.2, 0.4, 1.0], rtol=1e-6)
    np.testing.assert_array_equal(out["boxes"], BOXES)
    assert out["labels"].tolist() == [1, 2, 1]
    again = pickle.loads(pickle.dumps(det))  # a new session in each worker
    assert again._session is None and again([image])[0]["labels"].tolist() == [1, 2, 1]


def test_fixed_input_size_resizes_and_scales_boxes_back(tmp_path):
    """A model fixed at 8x8 sees a 16x24 image resized; its boxes come back in the image's pixels."""
    det = parse_detector(f"onnx:{_model(tmp_path / 'm.onnx', size=(8, 8))}")
    (out,) = det([np.full((16, 24, 3), 128, np.uint8)])
    np.testing.assert_allclose(out["boxes"], np.array(BOXES) * [3, 2, 3, 2])


def test_output_names_are_settable_and_checked(tmp_path):
    """#boxes=NAME picks another output; a name the model lacks is one line listing its outputs."""
    path = _model(tmp_path / "m.onnx", boxes_name="dets")
    listed = "has no output 'boxes' for boxes (its outputs: dets, scores, labels"
    with pytest.raises(UserError, match=re.escape(listed)):
        parse_detector(f"onnx:{path}")
    assert parse_detector(f"onnx:{path}#boxes=dets").settings["boxes"] == "dets"
    with pytest.raises(UserError, match="KEY=NAME"):
        parse_detector(f"onnx:{path}#colour=red")


def test_probe_runs_an_onnx_model(small_dataset, tmp_path):
    """The probe runs an ONNX model end to end, in two workers as in one."""
    ds, _ = small_dataset
    path = _model(tmp_path / "m.onnx")
    a = run_probe(ds, parse_detector(f"onnx:{path}"), tmp_path / "a", workers=1)
    run_probe(ds, parse_detector(f"onnx:{path}"), tmp_path / "b", workers=2)
    assert a.detected == 6
    assert (tmp_path / "a" / "predictions" / "ds.json").read_bytes() == (
        tmp_path / "b" / "predictions" / "ds.json").read_bytes()
