"""verify's checks of the collaborators' forms, each in its own engine on the reference rows:

* ``equation.R``, ``tree.R`` in R (``Rscript``), one run for both;
* ``equation.xlsx`` and the one-cell formulas of ``equation.txt`` recalculated by LibreOffice
  Calc (headless), one start for both workbooks;
* ``equation.sps`` in GNU PSPP;
* ``calculator.html`` in headless Chromium (selenium, chromedriver): the equation's and the tree's
  predictions as the page shows them, one browser session.

All compute in double precision, so they are held to the code exports' tolerances (values within
1e-7 × max(1, largest |reference|), probabilities within 1e-7). LibreOffice stores 15 significant
digits of each computed value (relative error below 1e-14), far inside that.
"""
from __future__ import annotations

import tempfile
from pathlib import Path

import numpy as np
import pandas as pd

from . import engines, runners
from .bundle_io import bundle_file, models_of
from ..export.spss import spss_names
from .verify import CODE_PROB_ATOL, CODE_RTOL, Check, compare_predictions

#: Engines a caller may skip (``verify --skip``): slow to start or absent on a slim machine.
ENGINES = ("r", "libreoffice", "pspp", "chromium")


def _compare(form: str, manifest: dict, ref: pd.DataFrame, model: str, got) -> Check:
    return compare_predictions(form, manifest, ref, model, got, rtol=CODE_RTOL, prob_atol=CODE_PROB_ATOL)


def _guarded(forms: list[tuple[str, str]], manifest: dict, ref: pd.DataFrame, files: list[str], run) -> list[Check]:
    """Run ``run() -> {form: predictions}`` for ``forms`` [(form, model)], turning an absent engine
    into skips and a failed run into failures, each with its reason."""
    absent = [f for f in files if f not in manifest.get("artifacts", {})]
    if absent:
        return [Check(form, False, None, None, f"{absent[0]} is not in this bundle") for form, _ in forms]
    try:
        got = run()
    except runners.RunnerUnavailable as exc:
        return [Check(form, True, None, None, f"skipped: {exc}", skipped=True) for form, _ in forms]
    except runners.RunnerFailed as exc:
        return [Check(form, False, None, None, str(exc)) for form, _ in forms]
    return [_compare(form, manifest, ref, model, got[form]) for form, model in forms]


def _skipped(forms: list[tuple[str, str]], engine: str) -> list[Check]:
    return [Check(form, True, None, None, f"skipped: --skip {engine}", skipped=True) for form, _ in forms]


R_FORMS = [("equation.R (R)", "equation"), ("tree.R (R)", "tree")]
PSPP_FORMS = [("equation.sps (GNU PSPP)", "equation")]
CALC_FORMS = [("equation.xlsx (LibreOffice Calc)", "equation"),
              ("equation.txt one-cell formulas (LibreOffice Calc)", "equation")]
PAGE_FORMS = [("calculator.html equation (Chromium)", "equation"), ("calculator.html tree (Chromium)", "tree")]


def r_checks(bundle, manifest: dict, ref: pd.DataFrame, work: Path) -> list[Check]:
    forms = _held(R_FORMS, manifest)   # tree.R alone in a bundle without an equation

    def run():
        paths = {form: bundle_file(bundle, manifest, f"{model}.R") for form, model in forms}
        return engines.run_r_exports(paths, ref, manifest["features"], manifest["task"], manifest.get("classes"), work)
    return _guarded(forms, manifest, ref, [f"{model}.R" for _, model in forms], run)


def pspp_checks(bundle, manifest: dict, ref: pd.DataFrame, work: Path) -> list[Check]:
    forms = PSPP_FORMS
    task, classes = manifest["task"], manifest.get("classes")

    def run():
        names = {f["name"]: f["spss_name"] for f in manifest["features"]}
        outputs = (["pred_equation"] if task == "regression" else
                   ["label_equation"] + [f"prob_equation_{k}" for k in range(1, len(classes) + 1)])
        outputs = list(spss_names(outputs, set(names.values())).values())  # as the syntax names them
        res = engines.run_sps(bundle_file(bundle, manifest, "equation.sps"), ref, manifest["features"],
                              names, outputs, work)
        if task == "regression":
            return {forms[0][0]: {"prediction": pd.to_numeric(res[outputs[0]], errors="coerce").to_numpy(dtype=float)}}
        probs = np.column_stack([pd.to_numeric(res[o], errors="coerce").to_numpy(dtype=float) for o in outputs[1:]])
        return {forms[0][0]: {"label": res[outputs[0]].astype(str).str.rstrip(" ").to_numpy(), "probabilities": probs}}
    return _guarded(forms, manifest, ref, ["equation.sps"], run)


def libreoffice_checks(bundle, manifest: dict, ref: pd.DataFrame, work: Path) -> list[Check]:
    forms = CALC_FORMS

    def run():
        from . import sheets
        book = bundle_file(bundle, manifest, "equation.xlsx")
        text = bundle_file(bundle, manifest, "equation.txt").read_text(encoding="utf-8")
        paste = sheets.paste_workbook(book, text, ref, manifest, work / "paste.xlsx")
        done = engines.recalculate([book, paste], work)
        return {forms[0][0]: sheets.read_outputs(done[0], len(ref), manifest),
                forms[1][0]: sheets.read_paste(done[1], len(ref), manifest)}
    return _guarded(forms, manifest, ref, ["equation.xlsx", "equation.txt"], run)


def chromium_checks(bundle, manifest: dict, ref: pd.DataFrame, work: Path) -> list[Check]:
    forms = PAGE_FORMS

    def run():
        got = engines.run_calculator(bundle_file(bundle, manifest, "calculator.html"), ref, manifest["features"],
                                     manifest["task"], manifest.get("classes"), work)
        return {forms[0][0]: got["equation"], forms[1][0]: got["tree"]}
    return _guarded(forms, manifest, ref, ["calculator.html"], run)


_CHECKS = (("r", r_checks, R_FORMS), ("libreoffice", libreoffice_checks, CALC_FORMS),
           ("pspp", pspp_checks, PSPP_FORMS), ("chromium", chromium_checks, PAGE_FORMS))
#: Engines whose file exists only with an equation (the workbook, the SPSS syntax, and the
#: calculator page, which shows the equation beside the tree).
EQUATION_ENGINES = ("libreoffice", "pspp", "chromium")


def _held(forms: list[tuple[str, str]], manifest: dict) -> list[tuple[str, str]]:
    """The forms of the models the bundle holds."""
    held = models_of(manifest)
    return [(form, model) for form, model in forms if model in held]


def collaborator_checks(bundle, manifest: dict, ref: pd.DataFrame, skip=()) -> list[Check]:
    """Every engine's checks, each engine in a fresh temporary folder. A bundle without an
    equation has only tree.R among these forms (no SPSS syntax, workbook or calculator page)."""
    out: list[Check] = []
    for engine, check, forms in _CHECKS:
        if engine in EQUATION_ENGINES and "equation" not in models_of(manifest):
            continue   # its file is written only with an equation: nothing to start
        if engine in skip:
            out += _skipped(forms, engine)
            continue
        with tempfile.TemporaryDirectory(prefix=f"pf-{engine}-") as work:
            out += check(bundle, manifest, ref, Path(work))
    return out
