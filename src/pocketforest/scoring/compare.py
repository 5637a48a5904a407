"""`compare`: how do a bundle's models (three, or two without an equation) do on new labelled rows, and how far have the rows moved?

Months after fitting, a user holds new rows with the outcome recorded. This module scores them
with the bundle's own ONNX models (as `score` would, so what is judged is what ships), then
reports each model's metrics, the surrogates' fidelity to the forest and their accuracy loss with
a paired-bootstrap interval (the same computation `distill` made on its test rows), and drift:
rows outside the training envelope, per-column shifts against the discovery rows, unseen levels.

Exit status (see the CLI): 0 normally; 1 when a threshold the user set is crossed
(``--max-loss``: the loss of the tree or the equation exceeds it; ``--max-outside``: the share of
rows with an input outside the training envelope exceeds it). Bad input: 2.
"""
from __future__ import annotations

import json
import math
import os
import tempfile
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from ..errors import InputError
from ..evaluate import fidelity, loss_with_interval, metrics
from ..intake.coerce import coerce_for_scoring
from ..intake.reading import read_table
from ..intake.values import category_text
from ..summary import aligned_columns
from .bundle_io import equation_absent, models_of, read_manifest
from .runtime import MODELS, Scorer, envelope_count
from .score import features_of

#: |standardised mean difference| above which a column is flagged as shifted. 0.1 is the usual
#: balance threshold for SMDs (Austin, P. C. 2009, "Balance diagnostics for comparing the
#: distribution of baseline covariates between treatment groups in propensity-score matched
#: samples", Statistics in Medicine 28:3083–3107).
SMD_FLAG = 0.1
#: a level's share moving by more than this (absolute) is flagged (common practice, our choice).
SHARE_FLAG = 0.10


@dataclass
class Comparison:
    """Everything `compare` found; ``to_dict`` is the JSON form, ``text`` the terminal form."""
    bundle: str
    data: str
    task: str
    target: str
    rows: int
    rows_without_target: int
    rows_unknown_class: int
    evaluation: dict
    fidelity: dict
    loss: dict
    drift: dict
    training: dict
    thresholds: dict = field(default_factory=dict)
    breaches: list[str] = field(default_factory=list)
    #: rows left out because a model gave no prediction (the equation has no finite value there)
    rows_without_prediction: int = 0
    #: the manifest's ``equation`` record when the bundle has no equation (None: it has one)
    equation_absent: dict | None = None

    @property
    def exit_code(self) -> int:
        return 1 if self.breaches else 0

    def to_dict(self) -> dict:
        return _clean({"bundle": self.bundle, "data": self.data, "task": self.task, "target": self.target,
                       "rows": self.rows, "rows_without_target": self.rows_without_target,
                       "rows_unknown_class": self.rows_unknown_class,
                       "rows_without_prediction": self.rows_without_prediction, "evaluation": self.evaluation,
                       "fidelity": self.fidelity, "loss": self.loss, "drift": self.drift,
                       "at_distill": self.training, "thresholds": self.thresholds,
                       "breaches": self.breaches, "exit_code": self.exit_code,
                       **({"equation_absent": self.equation_absent} if self.equation_absent else {})})

    def text(self) -> str:
        return comparison_text(self.to_dict())


def compare(bundle: str | os.PathLike, data: str | os.PathLike, *, max_loss: float | None = None,
            max_outside: float | None = None, resamples: int | None = None,
            decimal_comma: bool = False) -> Comparison:
    """Score ``data`` (labelled rows) with all three models of ``bundle`` and measure loss and drift
    (``decimal_comma``: as in :func:`intake.read_table`)."""
    manifest = read_manifest(bundle)
    target, task = manifest["target"], manifest["task"]
    classes = manifest.get("classes")
    features = features_of(manifest)
    raw = read_table(data, decimal_comma=decimal_comma)
    if target not in raw.columns:
        raise InputError(f"{data}: no column '{target}' (the bundle's target): compare needs labelled rows; "
                         "add the outcome column, or use `pocketforest score` for unlabelled rows")
    y_raw = raw[target]
    present = y_raw.notna().to_numpy()
    without = int((~present).sum())
    raw = raw.loc[present].reset_index(drop=True)
    if len(raw) == 0:
        raise InputError(f"{data}: column '{target}' is empty in every row: compare needs labelled rows")
    y, unknown = _labels(raw[target], task, classes, data, target)
    typed = coerce_for_scoring(raw, features, source=str(data))
    outside_rows = envelope_count(typed, manifest["features"])
    drift = _drift(typed, manifest["features"], outside_rows)
    keep = ~unknown
    if keep.sum() < 2:
        raise InputError(f"{data}: fewer than 2 rows with a known '{target}': compare needs more labelled rows")
    scored = typed.loc[keep].reset_index(drop=True)
    y = y[keep]
    preds = {}
    for model in models_of(manifest):
        out = Scorer(bundle, model, manifest).run(scored)
        preds[model] = out["prediction"] if task == "regression" else out["probabilities"]
    # every model is judged on the same rows: those where each gave a prediction
    scored_ok = np.all([np.isfinite(p.reshape(len(y), -1)).all(axis=1) for p in preds.values()], axis=0)
    without_prediction = int((~scored_ok).sum())
    if scored_ok.sum() < 2:
        raise InputError(f"{data}: fewer than 2 rows where every model gives a prediction (the equation has no "
                         "finite value on the others, see the README): compare needs more rows inside its range")
    y = y[scored_ok]
    preds = {m: p[scored_ok] for m, p in preds.items()}
    resamples = resamples or int(manifest.get("loss", {}).get("tree", {}).get("resamples", 1000))
    evaluation, fid, loss = judge(y, preds, task, classes, resamples=resamples, seed=int(manifest.get("seed", 0)))
    training = {"evaluation": manifest.get("evaluation"), "fidelity": manifest.get("fidelity"),
                "loss": manifest.get("loss")}
    result = Comparison(str(bundle), str(data), task, target, int(len(y)), without, int(unknown.sum()),
                        evaluation, fid, loss, drift, training,
                        thresholds={"max_loss": max_loss, "max_outside": max_outside},
                        rows_without_prediction=without_prediction, equation_absent=equation_absent(manifest))
    result.breaches = _breaches(result, max_loss, max_outside)
    return result


def judge(y: np.ndarray, preds: dict[str, np.ndarray], task: str, classes: list[str] | None, *,
          resamples: int, seed: int) -> tuple[dict, dict, dict]:
    """Each model's metrics, the surrogates' fidelity, and their loss with its paired-bootstrap
    interval on labelled rows: what `compare` reports, and what `distill --sample` measures on
    its check rows."""
    surrogates = [m for m in MODELS[1:] if m in preds]   # no equation when the bundle has none
    evaluation = {"on": "new rows", "n": int(len(y)),
                  **{m: metrics(y, preds[m], task, classes) for m in MODELS if m in preds}}
    fid = {m: fidelity(preds["forest"], preds[m], task) for m in surrogates}
    loss = {m: loss_with_interval(y, preds["forest"], preds[m], task, classes, resamples=resamples, seed=seed)
            for m in surrogates}
    return evaluation, fid, loss


def labels(y: pd.Series, task: str, classes: list[str] | None, source, target: str) -> tuple[np.ndarray, np.ndarray]:
    """Typed outcome and a mask of rows whose class the bundle never saw."""
    return _labels(y, task, classes, source, target)


def _labels(y: pd.Series, task: str, classes: list[str] | None, source, target: str) -> tuple[np.ndarray, np.ndarray]:
    """Typed outcome and a mask of rows whose class the bundle never saw."""
    if task == "regression":
        values = pd.to_numeric(y, errors="coerce")
        bad = values.isna().to_numpy()
        if bad.any():
            examples = ", ".join(repr(str(v)) for v in y[bad].unique()[:3])
            raise InputError(f"{source}: target '{target}' must be numeric but has {int(bad.sum())} text "
                             f"value(s) ({examples}): fix them or leave the cells empty")
        return values.to_numpy(dtype=np.float64), np.zeros(len(y), dtype=bool)
    labels = np.array([category_text(v) for v in y], dtype=object)
    unknown = ~np.isin(labels, np.asarray(classes, dtype=object))
    return labels, unknown


def _pooled_sd(a: float | None, b: float | None) -> float | None:
    if a is None or b is None:
        return None
    s = math.sqrt((a * a + b * b) / 2.0)
    return s if s > 0 else None


def _drift(typed: pd.DataFrame, features: list[dict], outside_rows: np.ndarray) -> dict:
    """Envelope share, per-column shifts against the discovery rows, unseen categories."""
    columns = []
    for f in features:
        col = typed[f["name"]]
        entry = {"name": f["name"], "kind": f["kind"], "missing_training": f.get("missing")}
        if f["kind"] == "numeric":
            x = col.to_numpy(dtype=np.float64)
            ok = x[~np.isnan(x)]
            entry["missing_new"] = float(np.isnan(x).mean())
            mean_new = float(ok.mean()) if len(ok) else None
            sd_new = float(ok.std(ddof=1)) if len(ok) > 1 else None
            mean_t, sd_t = f.get("mean"), f.get("sd")
            pooled = _pooled_sd(sd_t, sd_new)
            smd = (mean_new - mean_t) / pooled if (pooled and mean_new is not None and mean_t is not None) else None
            with np.errstate(invalid="ignore"):
                outside = float(np.mean((ok < f["min"]) | (ok > f["max"]))) if len(ok) else 0.0
            entry.update({"mean_training": mean_t, "mean_new": mean_new, "sd_training": sd_t, "sd_new": sd_new,
                          "smd": smd, "outside_range": outside,
                          "flag": bool(smd is not None and abs(smd) > SMD_FLAG)})
        else:
            v = col.fillna("").astype(str)
            entry["missing_new"] = float((v == "").mean())
            present = v[v != ""]
            counts = present.value_counts()
            total = max(int(counts.sum()), 1)
            known = list(f.get("categories") or [])
            train = f.get("shares")
            shares = [{"level": lv, "training": (train or {}).get(lv) if train is not None else None,
                       "new": float(counts.get(lv, 0)) / total} for lv in known]
            unseen = sorted(lv for lv in counts.index if lv not in set(known))
            biggest = max((abs(s["new"] - s["training"]) for s in shares if s["training"] is not None), default=None)
            entry.update({"shares": shares, "unseen_levels": unseen,
                          "unseen_rows": int(sum(int(counts[lv]) for lv in unseen)),
                          "largest_share_change": biggest,
                          "flag": bool(unseen or (biggest is not None and biggest > SHARE_FLAG))})
        columns.append(entry)
    return {"rows_outside_envelope": int((outside_rows > 0).sum()),
            "share_outside_envelope": float((outside_rows > 0).mean()) if len(outside_rows) else 0.0,
            "unseen_category_rows": int(sum(c.get("unseen_rows", 0) for c in columns)),
            "smd_flag": SMD_FLAG, "share_flag": SHARE_FLAG, "columns": columns}


def _breaches(c: Comparison, max_loss: float | None, max_outside: float | None) -> list[str]:
    out = []
    if max_loss is not None:
        for m in c.loss:
            lo = c.loss[m]
            if lo["value"] > max_loss:
                out.append(f"{m} loses {lo['value']:.4f} in {lo['metric']} against the forest "
                           f"(more than --max-loss {max_loss:g})")
    if max_outside is not None and c.drift["share_outside_envelope"] > max_outside:
        out.append(f"{c.drift['share_outside_envelope']:.1%} of rows have an input outside the training "
                   f"envelope (more than --max-outside {max_outside:g})")
    return out


def _clean(value):
    if isinstance(value, dict):
        return {str(k): _clean(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_clean(v) for v in value]
    if isinstance(value, np.integer):
        return int(value)
    if isinstance(value, (float, np.floating)):
        v = float(value)
        return v if math.isfinite(v) else None
    if isinstance(value, np.bool_):
        return bool(value)
    return value


def _f(v, fmt: str = ".4f") -> str:
    return "–" if v is None else format(v, fmt)


def comparison_text(d: dict) -> str:
    """Terminal form of :meth:`Comparison.to_dict` (the JSON and the text show the same numbers)."""
    ev, then = d["evaluation"], (d["at_distill"].get("evaluation") or {})
    names = [k for k in ev["forest"]]
    lines = [f"pocketforest compare: {d['target']} ({d['task']}) on {d['rows']} new labelled rows of {d['data']}"]
    if d["rows_without_target"]:
        lines.append(f"  {d['rows_without_target']} rows without '{d['target']}' left out")
    if d["rows_unknown_class"]:
        lines.append(f"  {d['rows_unknown_class']} rows with a class the bundle never saw left out of the metrics")
    if d.get("rows_without_prediction"):
        lines.append(f"  {d['rows_without_prediction']} rows where the equation has no finite value left out of the metrics")
    # the figures the bundle was judged by: its test rows, or cross-validation below 800 rows
    judged = "cross-validated" if then.get("on") == "cross-validation" else "test rows"
    table = [["model"] + names + [f"(at distill, {judged})"]]
    for m in (m for m in MODELS if m in ev):
        old = then.get(m) or {}
        table.append([m] + [_f(ev[m][n]) for n in names]
                     + ["(" + ", ".join(f"{n} {_f(old.get(n))}" for n in names) + ")"])
    lines += [""] + aligned_columns(table, [False] + [True] * len(names) + [False]) + [""]
    if d.get("equation_absent"):
        lines.append("equation  none in this bundle: " + str(d["equation_absent"].get("reason")))
    for m in d["loss"]:
        lo, fid = d["loss"][m], d["fidelity"][m]
        old = (d["at_distill"].get("loss") or {}).get(m) or {}
        lines.append(f"{m:<9} fidelity " + ", ".join(f"{k} {_f(v, '.3f')}" for k, v in fid.items())
                     + f"; loss in {lo['metric']} {_f(lo['value'], '+.4f')} (95% interval "
                     f"{_f(lo['ci_low'], '+.4f')} to {_f(lo['ci_high'], '+.4f')}; at distill {_f(old.get('value'), '+.4f')})")
    dr = d["drift"]
    lines += ["", f"drift: {dr['rows_outside_envelope']} of {d['rows'] + d['rows_unknown_class']} rows "
              f"({dr['share_outside_envelope']:.1%}) have an input outside the training envelope; "
              f"{dr['unseen_category_rows']} rows carry a category never seen in training"]
    num = [c for c in dr["columns"] if c["kind"] == "numeric"]
    if num:
        lines.append(f"  {'numeric column':<20}{'mean then':>12}{'mean now':>12}{'sd then':>10}{'sd now':>10}"
                     f"{'SMD':>8}{'outside':>9}")
        for c in num:
            lines.append(f"  {c['name'][:19]:<20}{_f(c['mean_training'], '.4g'):>12}{_f(c['mean_new'], '.4g'):>12}"
                         f"{_f(c['sd_training'], '.3g'):>10}{_f(c['sd_new'], '.3g'):>10}{_f(c['smd'], '+.2f'):>8}"
                         f"{c['outside_range']:>9.1%}" + ("  shifted" if c["flag"] else ""))
    for c in (c for c in dr["columns"] if c["kind"] == "categorical"):
        parts = ", ".join(f"{s['level'] or '(missing)'} {_f(s['training'], '.0%')}→{s['new']:.0%}" for s in c["shares"])
        unseen = f"; unseen: {', '.join(c['unseen_levels'][:5])} ({c['unseen_rows']} rows)" if c["unseen_levels"] else ""
        lines.append(f"  {c['name']}: {parts}{unseen}" + ("  shifted" if c["flag"] else ""))
    lines.append(f"  (SMD = standardised mean difference, flagged above {dr['smd_flag']}; level shares flagged "
                 f"when they move by more than {dr['share_flag']:.0%})")
    if d["breaches"]:
        lines += [""] + [f"CHECK FAILED: {b}" for b in d["breaches"]]
    return "\n".join(lines)


def check_out(out: str | os.PathLike) -> Path:
    """Refuse a bad ``--out`` before any work is done."""
    out = Path(out)
    if out.suffix.lower() != ".json":
        raise InputError(f"--out {out}: compare writes its findings to a .json file")
    if not out.parent.exists():
        raise InputError(f"--out {out}: folder {out.parent} does not exist: create it first")
    return out


def write_json(d: dict, out: str | os.PathLike) -> None:
    """Atomic write: a temporary file beside ``out``, then a rename."""
    out = check_out(out)
    fd, tmp = tempfile.mkstemp(prefix=".pf-compare-", suffix=".json", dir=str(out.parent))
    try:
        with os.fdopen(fd, "w", encoding="utf-8") as fh:
            fh.write(json.dumps(d, indent=2) + "\n")
        os.replace(tmp, out)
    except BaseException:
        if os.path.exists(tmp):
            os.remove(tmp)
        raise
