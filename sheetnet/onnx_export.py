"""A model's whole prediction as an ONNX graph: preparation, every member, the average and the labels.

The graph is built with the `onnx` package's helper API, in float64 (double)
throughout, so onnxruntime gives the model's own predictions to about 1e-15.

Inputs: one per input column of the model, in training order, named as the
column, shape (rows, 1): ``double`` for a numeric column (its scaling folded
into the first layer, as `Model.predict` does), ``string`` for a category column,
holding each cell's category text as sheetnet reads it (trimmed; whole numbers
without '.0'; `onnx_inputs` builds them from any table `predict` takes).

Outputs:
- ``prediction``: values (regression, double) or class labels (int64, double,
  bool or string, by the kind of the labels), shape (rows,);
- ``probabilities`` (classifiers): shape (rows, classes), in the order of
  ``model.classes``;
- ``unknown_category``: per row, True when a category cell is none of the
  categories seen in training (the one-hot columns are then all zero; where
  sheetnet's own predict refuses such a row, a graph cannot refuse, so check
  this output).

Needs the optional extra ``onnx`` (``pip install '.[onnx]'`` in a clone of the repository).

>>> graph = to_onnx(model)                                              # doctest: +SKIP
>>> session = onnxruntime.InferenceSession(graph.SerializeToString())   # doctest: +SKIP
>>> session.run(["prediction"], onnx_inputs(model, X))[0]               # doctest: +SKIP
"""

from __future__ import annotations

import os
from pathlib import Path
from typing import Any

import numpy as np

from .errors import ModelError
from .model import Model
from .preparation import CategoryInput, NumericInput, numbers_of, texts_of

OPSET = 19  # Equal on strings needs 19
OUTPUTS = ("prediction", "probabilities", "unknown_category")
ONNX_ACTIVATIONS = {"tanh": "Tanh", "logistic": "Sigmoid", "relu": "Relu", "identity": None}
INSTALL = "the ONNX export needs the packages onnx and onnxruntime: install sheetnet with its onnx extra (pip install '.[onnx]' in a clone of the repository)"


def _onnx() -> Any:
    try:
        import onnx
    except ImportError:
        raise ModelError(INSTALL) from None
    return onnx


class _Graph:
    """Nodes and constants being collected, with names no input column can take."""

    def __init__(self, onnx: Any) -> None:
        self.onnx = onnx
        self.nodes: list[Any] = []
        self.constants: list[Any] = []
        self.count = 0

    def name(self, what: str) -> str:
        self.count += 1
        return f"sheetnet/{self.count}/{what}"

    def constant(self, what: str, values: Any, element: int | None = None) -> str:
        name = self.name(what)
        array = np.asarray(values)
        if element is None:
            self.constants.append(self.onnx.numpy_helper.from_array(array, name))
        else:  # strings
            self.constants.append(self.onnx.helper.make_tensor(name, element, array.shape, [str(v).encode("utf-8") for v in array.ravel()]))
        return name

    def node(self, op: str, inputs: list[str], what: str, output: str | None = None, **attributes: Any) -> str:
        out = output or self.name(what)
        self.nodes.append(self.onnx.helper.make_node(op, inputs, [out], **attributes))
        return out


def to_onnx(model: Model) -> Any:
    """The model's prediction as an `onnx.ModelProto` (checked by `onnx.checker`)."""
    onnx = _onnx()
    TensorProto = onnx.TensorProto
    if model.activation not in ONNX_ACTIVATIONS:
        raise ModelError(f"the ONNX export does not know the activation '{model.activation}' yet; train with tanh, logistic, relu or identity")
    clashes = [n for n in model.input_names if n in OUTPUTS]
    if clashes:
        raise ModelError(f"the input column '{clashes[0]}' has the name of an output of the ONNX graph; rename that column and train again")
    g = _Graph(onnx)
    inputs, parts, known = [], [], []
    for spec in model.preparation.inputs:
        if isinstance(spec, NumericInput):  # taken raw: its scaling is folded into the first layer, as predict does
            inputs.append(onnx.helper.make_tensor_value_info(spec.name, TensorProto.DOUBLE, ["rows", 1]))
            parts.append(spec.name)
        else:
            assert isinstance(spec, CategoryInput)
            inputs.append(onnx.helper.make_tensor_value_info(spec.name, TensorProto.STRING, ["rows", 1]))
            categories = g.constant("categories", np.array(spec.categories, dtype=object).reshape(1, -1), TensorProto.STRING)
            matches = g.node("Equal", [spec.name, categories], "matches")
            parts.append(g.node("Cast", [matches], "one_hot", to=TensorProto.DOUBLE))
            known.append(_row_max(g, parts[-1]))  # 1 when the cell is a known category, 0 when it matched none
    layer_input = parts[0] if len(parts) == 1 else g.node("Concat", parts, "inputs", axis=1)
    members = [_member(g, layer_input, _folded(model, model.weights(i)), model) for i in range(len(model.members))]
    if len(members) == 1:
        mean_output = members[0]
    else:  # onnxruntime has no double kernel for Mean
        mean_output = g.node("Div", [g.node("Sum", members, "member_sum"), g.constant("members", np.array([float(len(members))]))], "member_mean")
    outputs = _outputs(g, model, mean_output, TensorProto)
    if known:
        all_known = known[0] if len(known) == 1 else g.node("Min", known, "all_known")
        g.node("Equal", [all_known, g.constant("zero", np.array([0.0]))], "unknown", output="unknown_category")
    else:
        rows = g.node("Shape", [layer_input], "shape", start=0, end=1)
        g.node("ConstantOfShape", [rows], "unknown", output="unknown_category",
               value=onnx.helper.make_tensor("false", TensorProto.BOOL, [1], [False]))
    outputs.append(onnx.helper.make_tensor_value_info("unknown_category", TensorProto.BOOL, ["rows"]))
    graph = onnx.helper.make_graph(g.nodes, "sheetnet_model", inputs, outputs, g.constants)
    graph.doc_string = f"sheetnet {model.task} model: {'-'.join(map(str, model.sizes))} {model.activation}, {len(model.members)} member(s)"
    proto = onnx.helper.make_model(graph, opset_imports=[onnx.helper.make_opsetid("", OPSET)], producer_name="sheetnet")
    proto.ir_version = min(proto.ir_version, 9)  # readable by onnxruntime releases from 1.16 on
    onnx.checker.check_model(proto, full_check=True)
    return proto


def _row_max(g: _Graph, one_hot: str) -> str:
    axes = g.constant("axes", np.array([1], dtype=np.int64))
    return g.node("ReduceMax", [one_hot, axes], "known", keepdims=0)


def _folded(model: Model, layers: list[tuple[np.ndarray, np.ndarray]]) -> list[tuple[np.ndarray, np.ndarray]]:
    """The layers taking raw numbers and, for regression, giving values in the target's units.

    First layer: ``((x - mean) / scale) @ W + b == x @ (W / scale) + (b - (mean / scale) @ W)``, one-hot rows as they are.
    """
    mean, scale = np.zeros(model.preparation.width), np.ones(model.preparation.width)
    at = 0
    for spec in model.preparation.inputs:
        if isinstance(spec, NumericInput):
            mean[at], scale[at] = spec.mean, spec.scale
        at += spec.width
    (w, b), rest = layers[0], layers[1:]
    folded = [(w / scale[:, None], b - (mean / scale) @ w), *rest]
    if model.task == "regression":  # values = z * scale + mean, in the last layer's weights
        w_last, b_last = folded[-1]
        folded[-1] = (w_last * model.target.scale, b_last * model.target.scale + model.target.mean)
    return folded


def _member(g: _Graph, rows: str, layers: list[tuple[np.ndarray, np.ndarray]], model: Model) -> str:
    """One network's output layer after its head: values, a probability, or class probabilities."""
    a = rows
    for w, b in layers:
        z = g.node("Gemm", [a, g.constant("W", np.array(w, dtype=np.float64)), g.constant("b", np.array(b, dtype=np.float64))], "z")
        op = ONNX_ACTIVATIONS[model.activation]
        a = g.node(op, [z], model.activation) if op else z
    if model.task == "regression":
        return z
    if model.task == "binary":
        return g.node("Sigmoid", [z], "probability")
    return g.node("Softmax", [z], "class_probabilities", axis=1)


def _outputs(g: _Graph, model: Model, output: str, TensorProto: Any) -> list[Any]:
    make = g.onnx.helper.make_tensor_value_info
    flat = g.constant("flat", np.array([-1], dtype=np.int64)) if model.task != "multiclass" else ""
    if model.task == "regression":
        g.node("Reshape", [output, flat], "prediction", output="prediction")  # the target's scaling is folded into the last layer
        return [make("prediction", TensorProto.DOUBLE, ["rows"])]
    if model.task == "binary":
        first = g.node("Sub", [g.constant("one", np.array([[1.0]])), output], "first_class")
        g.node("Concat", [first, output], "probabilities", output="probabilities", axis=1)
        second = g.node("Reshape", [output, flat], "second_probability")
        index = g.node("Cast", [g.node("GreaterOrEqual", [second, g.constant("threshold", np.array([model.threshold]))], "at_threshold")],
                       "index", to=TensorProto.INT64)
    else:
        g.node("Identity", [output], "probabilities", output="probabilities")
        index = g.node("ArgMax", [output], "index", axis=1, keepdims=0)
    labels, element = _labels(model)
    table = g.constant("classes", labels, element if element == TensorProto.STRING else None)
    g.node("Gather", [table, index], "prediction", output="prediction", axis=0)
    return [make("prediction", element, ["rows"]), make("probabilities", TensorProto.DOUBLE, ["rows", len(model.classes)])]


def _labels(model: Model) -> tuple[np.ndarray, int]:
    """The class labels as one tensor, of the type `predict` gives them in."""
    TensorProto = _onnx().TensorProto
    labels = np.asarray(model.classes)
    if labels.dtype.kind == "b":
        return labels, TensorProto.BOOL
    if labels.dtype.kind in "iu":
        return labels.astype(np.int64), TensorProto.INT64
    if labels.dtype.kind == "f":
        return labels.astype(np.float64), TensorProto.DOUBLE
    return np.array([str(v) for v in model.classes], dtype=object), TensorProto.STRING


def onnx_inputs(model: Model, X: Any) -> dict[str, np.ndarray]:
    """The graph's inputs for a table ``X`` (anything `Model.predict` takes): one (rows, 1) array per column.

    Cells are checked as `predict` checks them (a blank or a text in a numeric column is named).
    """
    feeds: dict[str, np.ndarray] = {}
    for spec, values in zip(model.preparation.inputs, model.preparation.columns_in_order(X)):
        if isinstance(spec, NumericInput):
            feeds[spec.name] = numbers_of(spec.name, values).reshape(-1, 1)
        else:
            feeds[spec.name] = texts_of(spec.name, values).astype(object).reshape(-1, 1)
    return feeds


def save_onnx(model: Model, path: str | os.PathLike[str]) -> Path:
    """Write the model's ONNX graph to ``path`` (conventionally ending in .onnx); returns the path."""
    target = Path(path)
    if target.is_dir():
        raise ModelError(f"'{target}' is a folder; give the name of the file to write, for example '{target / 'model.onnx'}'")
    target.write_bytes(to_onnx(model).SerializeToString())
    return target
