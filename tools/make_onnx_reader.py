"""Build the bundled example ONNX reader, ``tools/moment_reader_64.onnx`` (needs the ``onnx`` package).

A tiny model of our own, written with the ``onnx`` package's helper API (no
deep-learning framework): it computes the first moment of the pixel values
over an annulus of the instrument's disc, ``m = image · W`` with ``W`` the
annulus weights times ``x`` and ``y`` (face units), and returns the bank
``atan(−m_x / m_y)`` in degrees — the built-in moment reader's formula, valid
for |bank| < 90°. It shows the model contract ``rollrig read-test`` expects
(input ``(batch, 1, S, S)`` float32 in 0..1, output bank in degrees) and lets
the tests check the ONNX path against a numpy implementation of the same
model.

    python tools/make_onnx_reader.py            # writes tools/moment_reader_64.onnx
    python tools/make_onnx_reader.py --size 32 --out other.onnx
"""

from __future__ import annotations

import argparse
import math
from pathlib import Path

import numpy as np

__all__ = ["moment_weights", "build_model", "numpy_model"]


def moment_weights(size_px: int, inner: float = 0.5, outer: float = 0.7) -> np.ndarray:
    """``(size², 2)`` float32: anti-aliased annulus weights times x and y (face units, y up)."""
    from rollrig.sensors.instrument import face_coordinates

    x, y, u = face_coordinates(size_px)
    r = np.hypot(x, y)
    m = np.clip((r - inner) * u + 0.5, 0, 1) * np.clip((outer - r) * u + 0.5, 0, 1)
    return np.stack([(m * x).ravel(), (m * y).ravel()], axis=1).astype(np.float32)


def numpy_model(images: np.ndarray, weights: np.ndarray) -> np.ndarray:
    """The same computation in numpy: bank (deg) from ``(batch, 1, S, S)`` images."""
    m = images.reshape(images.shape[0], -1).astype(np.float32) @ weights
    return np.degrees(np.arctan(-m[:, 0] / m[:, 1]))


def build_model(size_px: int):
    """The ONNX model (an ``onnx.ModelProto``)."""
    from onnx import TensorProto, helper, numpy_helper

    w = moment_weights(size_px)
    nodes = [
        helper.make_node("Flatten", ["image"], ["flat"], axis=1),
        helper.make_node("MatMul", ["flat", "W"], ["m"]),
        helper.make_node("Gather", ["m", "i0"], ["mx"], axis=1),
        helper.make_node("Gather", ["m", "i1"], ["my"], axis=1),
        helper.make_node("Neg", ["mx"], ["neg_mx"]),
        helper.make_node("Div", ["neg_mx", "my"], ["ratio"]),
        helper.make_node("Atan", ["ratio"], ["rad"]),
        helper.make_node("Mul", ["rad", "to_deg"], ["bank_deg"]),
    ]
    inits = [
        numpy_helper.from_array(w, "W"),
        numpy_helper.from_array(np.array(0, dtype=np.int64), "i0"),
        numpy_helper.from_array(np.array(1, dtype=np.int64), "i1"),
        numpy_helper.from_array(np.array(180.0 / math.pi, dtype=np.float32), "to_deg"),
    ]
    graph = helper.make_graph(
        nodes,
        "rollrig_moment_reader",
        [helper.make_tensor_value_info("image", TensorProto.FLOAT, ["batch", 1, size_px, size_px])],
        [helper.make_tensor_value_info("bank_deg", TensorProto.FLOAT, ["batch"])],
        inits,
    )
    model = helper.make_model(graph, opset_imports=[helper.make_opsetid("", 13)], producer_name="rollrig")
    model.ir_version = 8  # readable by onnxruntime releases of the last years
    import onnx

    onnx.checker.check_model(model)
    return model


def main(argv: list[str] | None = None) -> None:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--size", type=int, default=64)
    p.add_argument("--out", type=Path, default=Path(__file__).with_name("moment_reader_64.onnx"))
    a = p.parse_args(argv)
    import onnx

    onnx.save(build_model(a.size), a.out)
    print(f"wrote {a.out}")


if __name__ == "__main__":
    main()
