"""Run the collaborators' forms in their own engines: R, LibreOffice Calc and GNU PSPP.

Like :mod:`pocketforest.runners`, nothing from a bundle runs inside this process: each engine is a
separate program started on a temporary folder that holds the reference rows, written by this
module in a form the engine reads without any guessing (R: CSV with the column types given;
PSPP: CSV with every category hex-encoded, so a newline, comma or quote in a value cannot split a
field). One start per engine and bundle: all rows, and every form the engine checks, in one run.
An absent engine raises :class:`runners.RunnerUnavailable` (verify reports a skip).
"""
from __future__ import annotations

import csv
import io
import os
import shutil
import subprocess
from pathlib import Path

import numpy as np
import pandas as pd

from .runners import RunnerFailed, RunnerUnavailable

TIMEOUT = 300

_R_RUNNER = r'''
# Scores pocketforest R exports: run_exports.R ROWS.csv TYPES.txt EXPORT.R OUT.csv [EXPORT.R OUT.csv ...]
args <- commandArgs(trailingOnly = TRUE)
types <- readLines(args[2], encoding = "UTF-8")
rows <- read.csv(args[1], colClasses = types, check.names = FALSE, na.strings = c("", "NA"), blank.lines.skip = FALSE,
                 encoding = "UTF-8", fileEncoding = "UTF-8", stringsAsFactors = FALSE)
for (i in seq(3, length(args), by = 2)) {
  env <- new.env()
  sys.source(args[i], envir = env, keep.source = FALSE)
  model <- get(ls(env, pattern = "^pocketforest_")[1], envir = env)
  res <- model$predict(rows)
  if (!is.data.frame(res)) res <- data.frame(prediction = res)
  for (j in seq_along(res)) if (is.numeric(res[[j]])) res[[j]] <- sprintf("%.17g", res[[j]])
  # a missing label (no finite class score) is an empty field, as in every other form's output
  write.csv(res, args[i + 1], row.names = FALSE, na = "", fileEncoding = "UTF-8")
}
'''


def _utf8_env() -> dict:
    """A UTF-8 locale for the child (names and levels are Unicode), whatever the caller's is."""
    return dict(os.environ, LC_ALL="C.UTF-8", LANG="C.UTF-8")


def _run(cmd: list[str], cwd: Path, label: str, env: dict | None = None) -> subprocess.CompletedProcess:
    try:
        proc = subprocess.run(cmd, capture_output=True, text=True, cwd=cwd, timeout=TIMEOUT,
                              env=env or _utf8_env(), encoding="utf-8", errors="replace")
    except subprocess.TimeoutExpired:
        raise RunnerFailed(f"{label} did not finish within {TIMEOUT} s") from None
    if proc.returncode != 0:
        tail = [ln for ln in ((proc.stderr or "") + "\n" + (proc.stdout or "")).strip().splitlines() if ln.strip()][-3:]
        raise RunnerFailed(f"{label} exited with {proc.returncode}: {' | '.join(tail)}")
    return proc


def _frame_csv(frame: pd.DataFrame, features: list[dict], path: Path) -> None:
    """Feature columns as CSV for R: numbers in hexadecimal (R reads those bit for bit, decimals not
    always: see :func:`export.rcode.r_exact`), a missing number as NA and a missing category as an
    empty field. (An empty number field would be written quoted, ``""``, when the file has one
    column, and R's scan refuses ``""`` as a number: found by tests/test_fuzz.py.)"""
    def number(v: float) -> str:
        return "NA" if np.isnan(v) else float(v).hex()
    out = pd.DataFrame({f["name"]: ([number(v) for v in pd.to_numeric(frame[f["name"]], errors="coerce").to_numpy(dtype=float)]
                                    if f["kind"] == "numeric" else frame[f["name"]].fillna("").astype(str))
                        for f in features})
    out.to_csv(path, index=False, lineterminator="\n", encoding="utf-8")


def _read_result(path: Path, task: str, classes: list[str] | None) -> dict[str, np.ndarray]:
    res = pd.read_csv(path, dtype=str, keep_default_na=False, encoding="utf-8")
    if task == "regression":
        return {"prediction": pd.to_numeric(res.iloc[:, 0], errors="coerce").to_numpy(dtype=float)}
    probs = np.column_stack([pd.to_numeric(res.iloc[:, k + 1], errors="coerce").to_numpy(dtype=float)
                             for k in range(len(classes))])
    return {"label": res.iloc[:, 0].astype(str).to_numpy(), "probabilities": probs}


# ---------------------------------------------------------------- R

def rscript() -> str:
    exe = shutil.which("Rscript")
    if exe is None:
        raise RunnerUnavailable("R (Rscript) is not installed: install r-base-core to check the R forms")
    return exe


def run_r_exports(exports: dict[str, Path], frame: pd.DataFrame, features: list[dict], task: str,
                  classes: list[str] | None, workdir: Path) -> dict[str, dict[str, np.ndarray]]:
    """Each R export's predictions on ``frame``, all in one ``Rscript --vanilla`` run."""
    exe = rscript()
    workdir = Path(workdir)
    (workdir / "run_exports.R").write_text(_R_RUNNER, encoding="utf-8")
    _frame_csv(frame, features, workdir / "rows.csv")
    (workdir / "types.txt").write_text("\n".join("numeric" if f["kind"] == "numeric" else "character"
                                                 for f in features) + "\n", encoding="utf-8")
    cmd = [exe, "--vanilla", "run_exports.R", "rows.csv", "types.txt"]
    for k, (name, path) in enumerate(exports.items()):
        cmd += [str(Path(path).resolve()), f"out_{k}.csv"]
    _run(cmd, workdir, "Rscript")
    return {name: _read_result(workdir / f"out_{k}.csv", task, classes) for k, name in enumerate(exports)}


# ---------------------------------------------------------------- GNU PSPP

def pspp() -> str:
    exe = shutil.which("pspp")
    if exe is None:
        raise RunnerUnavailable("GNU PSPP (pspp) is not installed: install pspp to check the SPSS syntax")
    return exe


ROW_VAR = "pf_row"


def run_sps(path: Path, frame: pd.DataFrame, features: list[dict], names: dict[str, str], outputs: list[str],
            workdir: Path, setup: tuple[str, ...] = ()) -> pd.DataFrame:
    """Run an SPSS syntax file on ``frame`` in GNU PSPP and return ``outputs`` in row order.

    The rows are loaded by a wrapper syntax this module writes: numbers as exact decimals (empty
    = system-missing), categories as hexadecimal UTF-8 read with SPSS's AHEX input format, so any
    character in a value arrives intact. ``names`` maps column names to SPSS variable names;
    ``setup`` is syntax run on the loaded data first (such as MISSING VALUES).
    """
    exe = pspp()
    workdir = Path(workdir)
    taken = {v.upper() for v in list(names.values()) + outputs}
    row_var = ROW_VAR
    while row_var.upper() in taken:
        row_var += "_"
    specs, cols = [f"{row_var} F8.0"], [list(range(len(frame)))]
    for f in features:
        var = names[f["name"]]
        if f["kind"] == "numeric":
            x = pd.to_numeric(frame[f["name"]], errors="coerce").to_numpy(dtype=float)
            cols.append(["" if np.isnan(v) else repr(float(v)) for v in x])
            specs.append(f"{var} F40.0")
        else:
            raw = [b"" if v is None or (isinstance(v, float) and v != v) else str(v).encode("utf-8")
                   for v in frame[f["name"]].tolist()]
            width = max([1] + [len(b) for b in raw])
            cols.append([b.hex().upper() for b in raw])
            specs.append(f"{var} AHEX{2 * width}")
    buf = io.StringIO()
    csv.writer(buf, lineterminator="\n").writerows(zip(*cols))
    (workdir / "rows.csv").write_text(buf.getvalue(), encoding="ascii")
    shutil.copyfile(path, workdir / "model.sps")
    keep = " ".join([row_var] + outputs)
    wrapper = ["SET DECIMAL=DOT.",
               "GET DATA /TYPE=TXT /FILE='rows.csv' /ENCODING='UTF-8' /ARRANGEMENT=DELIMITED",
               "  /DELCASE=LINE /DELIMITERS=\",\" /QUALIFIER='\"' /FIRSTCASE=1",
               "  /VARIABLES=" + "\n    ".join(specs) + ".",
               *setup,
               "INSERT FILE='model.sps' SYNTAX=BATCH ERROR=STOP.",
               f"SAVE TRANSLATE /OUTFILE='result.csv' /TYPE=CSV /FIELDNAMES /CELLS=VALUES /REPLACE",
               f"  /TEXTOPTIONS DECIMAL=DOT /KEEP={keep}.", ""]
    (workdir / "run.sps").write_text("\n".join(wrapper), encoding="ascii")
    proc = _run([exe, "-b", "run.sps", "-o", "log.txt"], workdir, "GNU PSPP")
    log = (workdir / "log.txt").read_text(encoding="utf-8", errors="replace") if (workdir / "log.txt").exists() else ""
    problems = [ln for ln in (proc.stdout + "\n" + log).splitlines() if "error:" in ln.lower()]
    if problems or not (workdir / "result.csv").is_file():
        raise RunnerFailed("GNU PSPP: " + (" | ".join(problems[:3]) or "no result was written"))
    res = pd.read_csv(workdir / "result.csv", dtype=str, keep_default_na=False, encoding="utf-8")
    res = res.sort_values(row_var, key=lambda s: s.astype(int), kind="stable").reset_index(drop=True)
    return res


# ---------------------------------------------------------------- LibreOffice Calc

# Recalculate every formula when a file is loaded (0 = always), whatever the file's cached values
# say; LibreOffice's Calc/Formula/Load settings, written into the fresh profile used for the run.
_LO_SETTINGS = """<?xml version="1.0" encoding="UTF-8"?>
<oor:items xmlns:oor="http://openoffice.org/2001/registry" xmlns:xs="http://www.w3.org/2001/XMLSchema"
           xmlns:xsi="http://www.w3.org/2001/XMLSchema-instance">
<item oor:path="/org.openoffice.Office.Calc/Formula/Load"><prop oor:name="OOXMLRecalcMode" oor:op="fuse"><value>0</value></prop></item>
<item oor:path="/org.openoffice.Office.Calc/Formula/Load"><prop oor:name="ODFRecalcMode" oor:op="fuse"><value>0</value></prop></item>
</oor:items>
"""


def soffice() -> str:
    for name in ("soffice", "libreoffice"):
        exe = shutil.which(name)
        if exe is not None:
            return exe
    raise RunnerUnavailable("LibreOffice (soffice) is not installed: install libreoffice-calc-nogui "
                            "to check the workbook")


def recalculate(workbooks: list[Path], workdir: Path) -> list[Path]:
    """Open each workbook in headless LibreOffice Calc, recalculate and save it again as .xlsx
    (with the computed values); one LibreOffice start for all of them, with a fresh profile."""
    exe = soffice()
    workdir = Path(workdir)
    profile = workdir / "lo-profile"
    (profile / "user").mkdir(parents=True, exist_ok=True)
    (profile / "user" / "registrymodifications.xcu").write_text(_LO_SETTINGS, encoding="utf-8")
    src, out = workdir / "lo-in", workdir / "lo-out"
    src.mkdir(exist_ok=True)
    out.mkdir(exist_ok=True)
    names = []
    for k, path in enumerate(workbooks):
        name = f"book_{k}.xlsx"
        shutil.copyfile(path, src / name)
        names.append(name)
    cmd = [exe, "--headless", "--invisible", "--norestore", "--nologo", "--nodefault", "--nolockcheck",
           f"-env:UserInstallation={profile.resolve().as_uri()}",
           "--convert-to", "xlsx:Calc MS Excel 2007 XML", "--outdir", str(out.resolve())] + [str(src / n) for n in names]
    env = dict(_utf8_env(), HOME=str(workdir.resolve()))
    _run(cmd, workdir, "LibreOffice", env=env)
    done = [out / n for n in names]
    missing = [p.name for p in done if not p.is_file()]
    if missing:
        raise RunnerFailed(f"LibreOffice wrote no result for {', '.join(missing)}")
    return done


# ---------------------------------------------------------------- Chromium (the calculator page)

CHROMIUM_FLAGS = ("--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking",
                  "--disable-component-update", "--disable-sync", "--no-first-run", "--disable-dev-shm-usage")

# Sets one row's inputs the way typing does (value, then an input event) and reads back what the
# page shows: each output element carries the exact number behind its rounded text in data-value.
_SET_AND_READ = r"""
var values = arguments[0], spec = JSON.parse(document.getElementById("pf-spec").textContent);
var refused = [];
spec.inputs.forEach(function (item, i) {
  var input = document.getElementById("pf-in-" + i), v = values[item.name];
  input.value = (v === null || v === undefined) ? "" : String(v);
  if (input.value !== ((v === null || v === undefined) ? "" : String(v))) refused.push(item.name);
});
document.getElementById("pf-in-0").dispatchEvent(new Event("input", {bubbles: true}));
function read(id) { var e = document.getElementById(id); return e ? e.getAttribute("data-value") : null; }
var out = {refused: refused, warning: !document.getElementById("pf-warning").hidden};
["equation", "tree"].forEach(function (m) {
  if (spec.task === "regression") { out[m] = read("pf-" + m); return; }
  out[m] = {label: read("pf-" + m + "-label"), p: spec.classes.map(function (c, k) { return read("pf-" + m + "-p" + k); })};
});
return out;
"""


def browser_paths() -> tuple[str, str]:
    chrome = next((p for p in (shutil.which(n) for n in ("chromium", "chromium-browser", "google-chrome")) if p), None)
    driver = shutil.which("chromedriver")
    if chrome is None or driver is None:
        raise RunnerUnavailable("Chromium and chromedriver are needed to check the calculator page "
                                "(Debian: chromium, chromium-driver)")
    return chrome, driver


def open_page(path: Path, workdir: Path):
    """A headless Chromium (through selenium and chromedriver) showing ``path``; call ``.quit()``."""
    chrome, driver_path = browser_paths()
    try:
        from selenium import webdriver
        from selenium.webdriver.chrome.service import Service
    except ImportError:
        raise RunnerUnavailable("selenium is not installed (pip install selenium) to check the calculator page") from None
    opts = webdriver.ChromeOptions()
    opts.binary_location = chrome
    profile = Path(workdir) / "chromium-profile"
    profile.mkdir(parents=True, exist_ok=True)
    for flag in CHROMIUM_FLAGS + (f"--user-data-dir={profile.resolve()}",):
        opts.add_argument(flag)
    try:
        driver = webdriver.Chrome(service=Service(executable_path=driver_path), options=opts)
    except Exception as exc:  # selenium raises its own types for a browser that will not start
        raise RunnerFailed(f"Chromium did not start: {str(exc).strip().splitlines()[0]}") from None
    try:
        driver.set_script_timeout(TIMEOUT)
        driver.get(Path(path).resolve().as_uri())
        ready = driver.execute_script("var e = document.getElementById('pf-ready'); return e && e.getAttribute('data-ready');")
        if ready != "yes":
            errors = [e.get("message", "") for e in (driver.get_log("browser") if hasattr(driver, "get_log") else [])]
            raise RunnerFailed("the calculator page did not start its script" + (f": {errors[0]}" if errors else ""))
    except BaseException:
        driver.quit()
        raise
    return driver


def run_calculator(path: Path, frame: pd.DataFrame, features: list[dict], task: str, classes: list[str] | None,
                   workdir: Path) -> dict[str, dict[str, np.ndarray]]:
    """The equation's and the tree's predictions as the page displays them, row by row, in one
    browser session."""
    from .runners import json_rows
    driver = open_page(path, workdir)
    try:
        shown = [driver.execute_script(_SET_AND_READ, row) for row in json_rows(frame, features)]
    finally:
        driver.quit()
    refused = sorted({name for s in shown for name in s["refused"]})
    if refused:
        raise RunnerFailed(f"the page offers no input for a value of {', '.join(map(repr, refused[:3]))}")
    out = {}
    for model in ("equation", "tree"):
        if task == "regression":
            out[model] = {"prediction": np.array([_float(s[model]) for s in shown])}
        else:
            out[model] = {"label": np.array([str(s[model]["label"]) for s in shown]),
                          "probabilities": np.array([[_float(p) for p in s[model]["p"]] for s in shown])}
    return out


def _float(text) -> float:
    try:
        return float(text)
    except (TypeError, ValueError):
        return float("nan")
