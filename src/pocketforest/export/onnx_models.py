"""The three ONNX models, all taking the same raw named inputs with preprocessing inside.

Forest and tree are converted by skl2onnx (float32, as the runtime requires for tree ensembles);
the equation is assembled from its expression trees with ``onnx.helper`` and computed in double
precision inside the graph, its regression output included. Where the equation has no finite value
(the log of a value <= 0, or an overflow) its prediction is missing: NaN, and for classification
NaN probabilities with the label "" — the same outcome as every printed form (see the README).
"""
from __future__ import annotations

import numpy as np
import onnx
from onnx import TensorProto, helper, numpy_helper
from skl2onnx import convert_sklearn
from skl2onnx.common.data_types import FloatTensorType, StringTensorType

from ..equation import EquationFit
from ..expr import Const, Is, Log, Node, Num, Pos, Prod, Square, Sub
from ..features import Feature
from .breakdown import grouping_matrix
from .tree_ensemble import upgrade

# skl2onnx converts at ai.onnx.ml opset 3 (TreeEnsembleRegressor/Classifier): asking it for opset 5
# still emits the legacy operators. Regression graphs are then moved to opset 5's TreeEnsemble by
# export/tree_ensemble.py (same predictions bit for bit, 2.6x smaller, faster per call; measured
# there). Both opsets load in onnxruntime 1.32 and onnxruntime-node 1.30.
OPSETS = {"": 17, "ai.onnx.ml": 3}


def _initial_types(features: list[Feature]) -> list:
    return [(f.onnx_input, FloatTensorType([None, 1]) if f.kind == "numeric" else StringTensorType([None, 1]))
            for f in features]


def convert_pipeline(pipeline, features: list[Feature], task: str, name: str, metadata: dict) -> onnx.ModelProto:
    """skl2onnx conversion with the contract's output names (``prediction`` or ``label``/``probabilities``)."""
    model = pipeline.steps[-1][1]
    if task == "regression":
        onx = convert_sklearn(pipeline, name=name, initial_types=_initial_types(features),
                              final_types=[("prediction", FloatTensorType([None, 1]))], target_opset=OPSETS)
    else:
        onx = convert_sklearn(pipeline, name=name, initial_types=_initial_types(features),
                              options={id(model): {"zipmap": False}}, target_opset=OPSETS)
        _rename_outputs(onx, {o.name: n for o, n in zip(onx.graph.output, ("label", "probabilities"))})
    _drop_optional_tree_attributes(onx)
    if task == "regression":
        upgrade(onx)
    _finish(onx, metadata)
    return onx


def _drop_optional_tree_attributes(model: onnx.ModelProto) -> None:
    """Remove tree-ensemble attributes that carry no information, about a fifth of a forest's bytes.

    ONNX-ML TreeEnsembleRegressor/Classifier: ``nodes_hitrates`` is popularity "used for
    performance and may be omitted"; ``nodes_missing_value_tracks_true`` may be left undefined and
    then defaults to 0 for every node, so it goes only when every entry is already 0 (the graphs
    impute before the trees, so no NaN reaches them anyway).
    """
    for node in model.graph.node:
        if node.domain != "ai.onnx.ml" or not node.op_type.startswith("TreeEnsemble"):
            continue
        keep = []
        for attr in node.attribute:
            if attr.name == "nodes_hitrates":
                continue
            if attr.name == "nodes_missing_value_tracks_true" and not any(attr.ints):
                continue
            keep.append(attr)
        del node.attribute[:]
        node.attribute.extend(keep)


def _rename_outputs(model: onnx.ModelProto, mapping: dict[str, str]) -> None:
    for node in model.graph.node:
        node.output[:] = [mapping.get(o, o) for o in node.output]
        node.input[:] = [mapping.get(i, i) for i in node.input]
    for out in model.graph.output:
        out.name = mapping.get(out.name, out.name)


def _finish(model: onnx.ModelProto, metadata: dict) -> None:
    model.producer_name = "pocketforest"
    model.producer_version = str(metadata.get("tool_version", ""))
    del model.metadata_props[:]
    for key, value in metadata.items():
        entry = model.metadata_props.add()
        entry.key, entry.value = str(key), str(value)
    onnx.checker.check_model(model, full_check=True)


class _GraphBuilder:
    """Collects nodes and constants; names are generated, never taken from user data."""

    def __init__(self, features: list[Feature]):
        self.nodes: list = []
        self.inits: list = []
        self.count = 0
        self.inputs = {f.name: f for f in features}
        self.cache: dict = {}
        # an input may be called "c_9" (a column named 9): generated names must never meet one
        self.taken = {f.onnx_input for f in features} | {"prediction", "label", "probabilities"}

    def name(self, stem: str) -> str:
        while True:
            self.count += 1
            name = f"{stem}_{self.count}"
            if name not in self.taken:
                return name

    def const(self, value, dtype=np.float64) -> str:
        arr = np.asarray(value, dtype=dtype) if dtype is not object else np.asarray(value, dtype=object)
        n = self.name("c")
        self.inits.append(numpy_helper.from_array(arr, n))
        return n

    def op(self, op_type: str, inputs: list[str], **attrs) -> str:
        out = self.name(op_type.lower())
        self.nodes.append(helper.make_node(op_type, inputs, [out], **attrs))
        return out

    def level_codes(self, feature: str) -> tuple[str, list[str]]:
        """Categories as integer codes (0 = a level never seen), via the ONNX-ML LabelEncoder;
        plain Equal on strings needs a newer opset than many runtimes carry."""
        key = ("codes", feature)
        if key not in self.cache:
            f = self.inputs[feature]
            levels = [""] + [lv for lv in (f.categories or []) if lv != ""]
            out = self.name("codes")
            self.nodes.append(helper.make_node("LabelEncoder", [f.onnx_input], [out], domain="ai.onnx.ml",
                                               keys_strings=levels, values_int64s=list(range(1, len(levels) + 1)),
                                               default_int64=0))
            self.cache[key] = (out, levels)
        return self.cache[key]

    def emit(self, node: Node) -> str:
        if node in self.cache:
            return self.cache[node]
        out = self._emit(node)
        self.cache[node] = out
        return out

    def _emit(self, node: Node) -> str:
        if isinstance(node, Num):
            x = self.op("Cast", [self.inputs[node.feature].onnx_input], to=TensorProto.DOUBLE)
            return self.op("Where", [self.op("IsNaN", [x]), self.const([[node.fill]]), x])
        if isinstance(node, Is):
            codes, levels = self.level_codes(node.feature)
            eq = self.op("Equal", [codes, self.const([[levels.index(node.level) + 1]], np.int64)])
            return self.op("Cast", [eq], to=TensorProto.DOUBLE)
        if isinstance(node, Const):
            return self.const([[node.value]])
        if isinstance(node, Sub):
            return self.op("Sub", [self.emit(node.left), self.emit(node.right)])
        if isinstance(node, Prod):
            out = self.emit(node.items[0])
            for item in node.items[1:]:
                out = self.op("Mul", [out, self.emit(item)])
            return out
        if isinstance(node, Square):
            a = self.emit(node.arg)
            return self.op("Mul", [a, a])
        if isinstance(node, Pos):
            return self.op("Max", [self.emit(node.arg), self.const([[0.0]])])
        if isinstance(node, Log):
            # the log of a value <= 0 (possible only beyond the training range) is NaN, as in
            # every printed form, never -inf
            a = self.emit(node.arg)
            positive = self.op("Greater", [a, self.const([[0.0]])])
            return self.op("Where", [positive, self.op("Log", [a]), self.const([[np.nan]])])
        raise TypeError(f"unknown node {node!r}")

    def zero_column(self) -> str:
        """Zeros, one per row of the first input (whatever its values), for an intercept-only
        equation: a 0/1 flag of the input times 0."""
        f = next(iter(self.inputs.values()))
        if f.kind == "numeric":
            flag = self.op("IsNaN", [f.onnx_input])
        else:
            codes, _ = self.level_codes(f.name)
            flag = self.op("Equal", [codes, self.const([[0]], np.int64)])
        return self.op("Mul", [self.op("Cast", [flag], to=TensorProto.DOUBLE), self.const([[0.0]])])

    def missing_if_not_finite(self, x: str) -> str:
        """NaN where ``x`` is ±inf (NaN stays NaN): the prediction is missing there."""
        return self.op("Where", [self.op("IsInf", [x]), self.const([[np.nan]]), x])


def _explain_outputs(g: _GraphBuilder, eq: EquationFit, design: str, eta: str, coef: np.ndarray) -> list:
    """Two more outputs for "why this score", so scoring explains a row with the very graph that
    predicts it: ``linear_predictor`` [N, B] (the eta above) and ``contributions`` [N, B, 1 + T],
    intercept then each term of :func:`breakdown.term_groups`, summed over the term's columns
    (B = 1 for regression and two classes, K - 1 otherwise). Computed apart from eta (elementwise
    products, then a 0/1 grouping matrix), so their sum checks the eta path, not repeats it."""
    n = g.op("Slice", [g.op("Shape", [design]), g.const([0], np.int64), g.const([1], np.int64)])
    ones = g.op("ConstantOfShape", [g.op("Concat", [n, g.const([1], np.int64)], axis=0)],
                value=numpy_helper.from_array(np.array([1.0], dtype=np.float64)))
    full = g.op("Concat", [ones, design], axis=1)                                   # [N, 1 + p]
    coef = np.asarray(coef, dtype=np.float64).reshape(design_width(eq) + 1, -1)      # [1 + p, B]
    groups = grouping_matrix(eq)
    if groups.shape[1] < coef.shape[0]:   # intercept only: the graph's zero column belongs to no term
        groups = np.hstack([groups, np.zeros((groups.shape[0], coef.shape[0] - groups.shape[1]))])
    products = g.op("Mul", [g.op("Unsqueeze", [full, g.const([2], np.int64)]), g.const(coef)])
    by_block = g.op("Transpose", [products], perm=[0, 2, 1])                        # [N, B, 1 + p]
    g.nodes.append(helper.make_node("MatMul", [by_block, g.const(groups.T)], ["contributions"]))
    g.nodes.append(helper.make_node("Identity", [eta], ["linear_predictor"]))
    blocks, terms = coef.shape[1], groups.shape[0]
    return [helper.make_tensor_value_info("linear_predictor", TensorProto.DOUBLE, [None, blocks]),
            helper.make_tensor_value_info("contributions", TensorProto.DOUBLE, [None, blocks, terms])]


def design_width(eq: EquationFit) -> int:
    """Columns of the graph's design: the equation's, or one zero column for an intercept only."""
    return max(1, len(eq.columns))


def equation_model(eq: EquationFit, features: list[Feature], metadata: dict) -> onnx.ModelProto:
    """The GLM as a graph: raw inputs → imputed terms → linear predictor → inverse link."""
    g = _GraphBuilder(features)
    cols = [g.emit(c.node) for c in eq.columns]
    coef = np.asarray(eq.coef, dtype=np.float64)
    if not cols:
        # intercept only (no variable earned a term): one zero column, as many rows as the input
        cols = [g.zero_column()]
        coef = np.concatenate([coef[:1], np.zeros_like(coef[:1])])
    design = g.op("Concat", cols, axis=1) if len(cols) > 1 else cols[0]
    weights = coef[1:].reshape(len(cols), -1)
    eta = g.op("Add", [g.op("MatMul", [design, g.const(weights)]), g.const(coef[0].reshape(1, -1))])
    explain = _explain_outputs(g, eq, design, eta, coef)
    outputs = []
    if eq.task == "regression":
        # double output: a prediction beyond float32's range (an input of 1e30 in a squared term)
        # stays the number the printed forms give, instead of becoming an infinity
        mean = eta if eq.link == "identity" else g.op("Exp", [eta])
        g.nodes.append(helper.make_node("Identity", [g.missing_if_not_finite(mean)], ["prediction"]))
        outputs.append(helper.make_tensor_value_info("prediction", TensorProto.DOUBLE, [None, 1]))
    else:
        # one non-finite score makes the whole row missing: eta * 0 is NaN exactly there
        spoil = g.op("ReduceSum", [g.op("Mul", [eta, g.const([[0.0]])]), g.const([1], np.int64)], keepdims=1)
        eta = g.op("Add", [eta, spoil])
        if len(eq.classes) == 2:
            p1 = g.op("Sigmoid", [eta])
            probs = g.op("Concat", [g.op("Sub", [g.const([[1.0]]), p1]), p1], axis=1)
        else:
            zeros = g.op("Mul", [g.op("Slice", [eta, g.const([0], np.int64), g.const([1], np.int64),
                                               g.const([1], np.int64)]), g.const([[0.0]])])
            probs = g.op("Softmax", [g.op("Concat", [zeros, eta], axis=1)], axis=1)
        idx = g.op("ArgMax", [probs], axis=1, keepdims=0)
        classes = g.const(np.array(eq.classes, dtype=object), object)
        label = g.op("Gather", [classes, idx], axis=0)
        first = g.op("Slice", [probs, g.const([0], np.int64), g.const([1], np.int64), g.const([1], np.int64)])
        missing = g.op("Squeeze", [g.op("IsNaN", [first]), g.const([1], np.int64)])
        g.nodes.append(helper.make_node("Where", [missing, g.const(np.array([""], dtype=object), object), label],
                                        ["label"]))
        g.nodes.append(helper.make_node("Cast", [probs], ["probabilities"], to=TensorProto.FLOAT))
        outputs += [helper.make_tensor_value_info("label", TensorProto.STRING, [None]),
                    helper.make_tensor_value_info("probabilities", TensorProto.FLOAT, [None, len(eq.classes)])]
    inputs = [helper.make_tensor_value_info(f.onnx_input, TensorProto.FLOAT if f.kind == "numeric"
                                            else TensorProto.STRING, [None, 1]) for f in features]
    graph = helper.make_graph(g.nodes, "equation", inputs, outputs + explain, g.inits)
    model = helper.make_model(graph, opset_imports=[helper.make_opsetid("", OPSETS[""]),
                                                    helper.make_opsetid("ai.onnx.ml", OPSETS["ai.onnx.ml"])],
                              producer_name="pocketforest")
    model.ir_version = 8
    _finish(model, metadata)
    return model
