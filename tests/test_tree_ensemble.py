"""The regression forest as ONNX-ML's opset-5 TreeEnsemble: the same predictions, bit for bit, as
the TreeEnsembleRegressor skl2onnx writes (ONNX-ML operator specification, onnx.ai), smaller."""
from __future__ import annotations

import numpy as np
import onnx
import pytest
from sklearn.ensemble import RandomForestRegressor
from sklearn.pipeline import Pipeline

from pocketforest.design import make_preprocessor, model_frame
from pocketforest.export import onnx_models
from pocketforest.export.tree_ensemble import tree_ensemble_node, upgrade
from pocketforest.intake import prepare
from pocketforest.scoring.runtime import feeds, make_session
from pocketforest.thresholds import snap_tree_thresholds

from conftest import synthetic_table


@pytest.fixture(scope="module")
def fitted():
    table = prepare(synthetic_table(n=600, seed=8), "y", source="t.csv")
    prep, _ = make_preprocessor(table.features, table.data)
    # 90 trees: more than the 80 from which onnxruntime's kernel splits trees between threads
    forest = RandomForestRegressor(n_estimators=90, min_samples_leaf=3, max_leaf_nodes=40, random_state=0)
    pipe = Pipeline([("prep", prep), ("forest", forest)]).fit(model_frame(table.data, table.features), table.data["y"])
    for est in forest.estimators_:
        snap_tree_thresholds(est)
    return table, pipe


def _legacy(pipe, table):
    saved = onnx_models.upgrade
    onnx_models.upgrade = lambda m: False
    try:
        return onnx_models.convert_pipeline(pipe, table.features, "regression", "forest", {"tool_version": "t"})
    finally:
        onnx_models.upgrade = saved


def test_opset5_forest_predicts_exactly_what_the_opset3_forest_predicts(fitted, tmp_path):
    table, pipe = fitted
    old = _legacy(pipe, table)
    new = onnx_models.convert_pipeline(pipe, table.features, "regression", "forest", {"tool_version": "t"})
    ops = {(n.domain, n.op_type) for n in new.graph.node}
    assert ("ai.onnx.ml", "TreeEnsemble") in ops and ("ai.onnx.ml", "TreeEnsembleRegressor") not in ops
    assert {o.domain: o.version for o in new.opset_import}["ai.onnx.ml"] == 5
    assert [i.name for i in new.graph.input] == [i.name for i in old.graph.input]
    assert [o.name for o in new.graph.output] == [o.name for o in old.graph.output]
    assert len(new.SerializeToString()) < 0.6 * len(old.SerializeToString())
    rows = synthetic_table(n=300, seed=99)  # new rows, with missing values
    fd = feeds(rows, [f.to_dict() for f in table.features])
    a = make_session(old.SerializeToString(), threads=1).run(None, fd)[0]
    b = make_session(new.SerializeToString(), threads=1).run(None, fd)[0]
    np.testing.assert_array_equal(a, b)  # same float32 leaf weights summed in the same tree order
    # and both reproduce scikit-learn within float32 rounding of a sum of 90 leaf values
    np.testing.assert_allclose(b.ravel(), pipe.predict(model_frame(rows, table.features)), rtol=0, atol=1e-5)


def test_a_tree_that_is_one_leaf_and_unsupported_nodes(fitted):
    from onnx import helper
    stump = helper.make_node("TreeEnsembleRegressor", ["X"], ["Y"], domain="ai.onnx.ml", n_targets=1,
                             nodes_treeids=[0, 1, 1, 1], nodes_nodeids=[0, 0, 1, 2], nodes_featureids=[0, 0, 0, 0],
                             nodes_modes=["LEAF", "BRANCH_LEQ", "LEAF", "LEAF"], nodes_values=[0.0, 0.5, 0.0, 0.0],
                             nodes_truenodeids=[0, 1, 0, 0], nodes_falsenodeids=[0, 2, 0, 0],
                             target_treeids=[0, 1, 1], target_nodeids=[0, 1, 2], target_ids=[0, 0, 0],
                             target_weights=[1.0, 10.0, 20.0])
    graph = helper.make_graph([stump], "g", [helper.make_tensor_value_info("X", onnx.TensorProto.FLOAT, [None, 1])],
                              [helper.make_tensor_value_info("Y", onnx.TensorProto.FLOAT, [None, 1])])
    model = helper.make_model(graph, opset_imports=[helper.make_opsetid("", 17), helper.make_opsetid("ai.onnx.ml", 3)])
    x = {"X": np.array([[0.2], [0.9]], dtype=np.float32)}
    before = make_session(model.SerializeToString(), threads=1).run(None, x)[0]
    assert upgrade(model)
    onnx.checker.check_model(model, full_check=True)
    after = make_session(model.SerializeToString(), threads=1).run(None, x)[0]
    np.testing.assert_array_equal(before, after)
    np.testing.assert_array_equal(after.ravel(), [11.0, 21.0])  # 1 + 10 and 1 + 20, by hand
    base = helper.make_node("TreeEnsembleRegressor", ["X"], ["Y"], domain="ai.onnx.ml", base_values=[3.0],
                            nodes_treeids=[0], nodes_nodeids=[0], nodes_featureids=[0], nodes_modes=["LEAF"],
                            nodes_values=[0.0], nodes_truenodeids=[0], nodes_falsenodeids=[0], target_treeids=[0],
                            target_nodeids=[0], target_ids=[0], target_weights=[1.0])
    assert tree_ensemble_node(base) is None  # a base value has no place in TreeEnsemble: left as it is


def test_one_thread_sessions_give_the_same_numbers_at_any_batch_size(fitted):
    """Why scoring sessions run one onnxruntime thread per call (scoring/runtime.py): with 90 trees
    (over the 80 from which onnxruntime 1.32's kernel may split trees between threads), a row's
    prediction must not depend on which rows share its batch, so every chunking of `score`, and
    every Dask worker, gives the same bits."""
    table, pipe = fitted
    model = onnx_models.convert_pipeline(pipe, table.features, "regression", "forest", {"tool_version": "t"})
    session = make_session(model.SerializeToString(), threads=1)
    rows = synthetic_table(n=300, seed=98)
    fd = feeds(rows, [f.to_dict() for f in table.features])
    whole = session.run(None, fd)[0]
    for size in (7, 50, 51, 120):
        parts = [session.run(None, {k: v[i:i + size] for k, v in fd.items()})[0] for i in range(0, 300, size)]
        np.testing.assert_array_equal(np.concatenate(parts), whole)
