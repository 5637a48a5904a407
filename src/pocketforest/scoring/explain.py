""""Why this score": each equation term's contribution and the tree's rule path, per row.

Computed from the bundle alone, without the fitting libraries:

* the equation: ``equation.onnx`` has two outputs besides its prediction, ``linear_predictor``
  [N, B] and ``contributions`` [N, B, 1 + T] (intercept, then each term: coefficient × design
  column, summed over the term's columns). The graph that predicts also explains, so the
  contributions follow the same inputs (float32, as for every ONNX input), the same imputation
  and the same coefficients; ``manifest.equation.contribution_labels`` names them.
* the tree: ``manifest.tree.nodes`` holds the surrogate tree as data (scikit-learn's node
  numbering); a row goes left at a numeric split when float32(x) <= threshold (a missing x takes
  the node's fill, as the tree's imputer does), and right at a categorical split when it equals
  the level, exactly as the fitted tree decides.

B is 1 for regression and two classes (the log-odds of the second class), K - 1 otherwise (each
class's log-odds against the first).
"""
from __future__ import annotations

import json
import re

import numpy as np
import pandas as pd

from .bundle_io import read_manifest
from ..errors import BundleError
from .runtime import Scorer, feeds

INTERCEPT = "(intercept)"
_PLAIN = re.compile(r"^[A-Za-z_][A-Za-z0-9_.]*$")


def _shown(text: str) -> str:
    return text if _PLAIN.match(text) else json.dumps(text, ensure_ascii=False)


def equation_columns(manifest: dict) -> tuple[list[str], list[str]]:
    """(linear predictor column names, contribution column names) as score writes them."""
    labels = manifest.get("equation", {}).get("contribution_labels")
    if not labels:
        raise BundleError("this bundle's manifest has no equation.contribution_labels: it predates "
                          "explanations; distill it again")
    blocks = _blocks(manifest)
    if blocks == [None]:
        return ["linear_predictor"], [f"contribution: {lab}" for lab in labels]
    return ([f"linear_predictor[{b}]" for b in blocks],
            [f"contribution[{b}]: {lab}" for b in blocks for lab in labels])


def _blocks(manifest: dict) -> list[str | None]:
    classes = manifest.get("classes")
    if manifest["task"] == "regression" or not classes or len(classes) == 2:
        return [None]
    return list(classes[1:])


class Explainer:
    """Explanations of one bundle's surrogates; :meth:`equation` and :meth:`tree` take rows typed
    as for scoring (columns named as the data's)."""

    def __init__(self, bundle, manifest: dict | None = None, *, check: bool = True):
        self.manifest = manifest or read_manifest(bundle)
        self.bundle = bundle
        self._check = check
        self._scorer: Scorer | None = None
        self._nodes = self.manifest.get("tree", {}).get("nodes")

    # -------------------------------------------------------------- equation

    def contributions(self, frame: pd.DataFrame) -> tuple[np.ndarray, np.ndarray]:
        """(linear predictor [N, B], contributions [N, B, 1 + T]) from equation.onnx."""
        if self._scorer is None:
            self._scorer = Scorer(self.bundle, "equation", self.manifest, check=self._check)
        names = {o.name for o in self._scorer.session.get_outputs()}
        if not {"linear_predictor", "contributions"} <= names:
            raise BundleError("this bundle's equation.onnx has no contributions output: it predates "
                              "explanations; distill it again")
        eta, parts = self._scorer.session.run(["linear_predictor", "contributions"],
                                              feeds(frame, self.manifest["features"]))
        return np.asarray(eta, dtype=np.float64), np.asarray(parts, dtype=np.float64)

    def equation(self, frame: pd.DataFrame) -> pd.DataFrame:
        eta, parts = self.contributions(frame)
        eta_names, part_names = equation_columns(self.manifest)
        data = dict(zip(eta_names, eta.T))
        flat = parts.reshape(len(frame), -1)          # block-major, as equation_columns orders them
        data.update(zip(part_names, flat.T))
        return pd.DataFrame(data, index=frame.index, columns=eta_names + part_names)

    # -------------------------------------------------------------- tree

    def _tree(self) -> list[dict]:
        if not self._nodes:
            raise BundleError("this bundle's manifest has no tree.nodes: it predates explanations; distill it again")
        return self._nodes

    def leaves(self, frame: pd.DataFrame, *, indicator: bool = False):
        """Leaf node id per row; with ``indicator``, also [N, nodes] of 0/1: 1 where the row passes
        the node (the layout of scikit-learn's ``decision_path``)."""
        nodes = self._tree()
        n = len(frame)
        internal_node = np.array(["feature" in node for node in nodes])
        at = np.zeros(n, dtype=np.int64)
        passed = np.zeros((n, len(nodes)), dtype=np.int8) if indicator else None
        if indicator:
            passed[:, 0] = 1
        cache: dict = {}
        while True:
            internal = internal_node[at]
            if not internal.any():
                break
            for i in np.unique(at[internal]):
                node = nodes[i]
                rows = np.flatnonzero(at == i)
                nxt = np.where(self._goes_right(node, frame, rows, cache), node["right"], node["left"])
                at[rows] = nxt
                if indicator:
                    passed[rows, nxt] = 1
        return (at, passed) if indicator else at

    def _goes_right(self, node: dict, frame: pd.DataFrame, rows: np.ndarray, cache: dict) -> np.ndarray:
        name = node["feature"]
        if "level" in node:
            if ("c", name) not in cache:
                cache[("c", name)] = frame[name].fillna("").astype(str).to_numpy()
            return cache[("c", name)][rows] == node["level"]
        if ("n", name) not in cache:
            cache[("n", name)] = pd.to_numeric(frame[name], errors="coerce").to_numpy(dtype=np.float64)
        x = cache[("n", name)][rows]
        x = np.where(np.isnan(x), float(node["fill"]), x).astype(np.float32)
        return ~(x <= np.float32(node["threshold"]))

    def rule_texts(self) -> dict[int, str]:
        """Leaf id → the rules that lead to it, e.g. ``x <= 0.5; colour = red; leaf 7``. A name or
        level that is not a plain word is written as a JSON string (``"two words" = "a;b"``), so the
        text splits unambiguously and never starts like a spreadsheet formula."""
        nodes = self._tree()
        out: dict[int, str] = {}

        def walk(i: int, conds: list[str]) -> None:
            node = nodes[i]
            if "feature" not in node:
                out[i] = "; ".join(conds + [f"leaf {i}"])
                return
            name = _shown(node["feature"])
            if "level" in node:
                level = _shown(node["level"])
                walk(node["left"], conds + [f"{name} != {level}"])
                walk(node["right"], conds + [f"{name} = {level}"])
            else:
                t = str(np.float32(node["threshold"]))
                walk(node["left"], conds + [f"{name} <= {t}"])
                walk(node["right"], conds + [f"{name} > {t}"])

        walk(0, [])
        return out

    def tree(self, frame: pd.DataFrame) -> pd.DataFrame:
        leaf = self.leaves(frame)
        texts = self.rule_texts()
        return pd.DataFrame({"tree_leaf": leaf, "tree_path": [texts[int(i)] for i in leaf]}, index=frame.index)
