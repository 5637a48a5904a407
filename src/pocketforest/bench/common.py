"""Pieces every benchmark section shares: the seeded data, the Figure, judging, child processes.

Every figure is a ratio of two things measured side by side in the same run on the same machine
(times on a shared machine are noisy; ratios of neighbouring measurements hold better), printed
with its target and a pass/short mark. Heavy work runs in child processes so each one's peak
memory is its own.
"""
from __future__ import annotations

import dataclasses
import json
import os
import platform
import subprocess
import sys
import tempfile
import time
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from ..errors import InputError

REGIONS = ["north", "south", "east", "west", "centre"]
GRADES = list("ABCDEFGH")


# --------------------------------------------------------------------------- data


def make_data(n: int, columns: int = 20, seed: int = 0, target: bool = True) -> pd.DataFrame:
    """Friedman #1 on the first five of ``columns - 2`` uniform columns, plus a region effect and a
    graded category; noise sd 1. Seeded, so every run sees the same table."""
    from sklearn.datasets import make_friedman1

    X, y = make_friedman1(n_samples=n, n_features=columns - 2, noise=1.0, random_state=seed)
    rng = np.random.default_rng(seed)
    df = pd.DataFrame(X, columns=[f"x{i + 1:02d}" for i in range(columns - 2)])
    region = rng.choice(REGIONS, n)
    grade_code = rng.integers(0, len(GRADES), n)
    df["region"] = region
    df["grade"] = np.asarray(GRADES, dtype=object)[grade_code]
    if target:
        df["y"] = y + np.where(region == "north", 1.5, 0.0) + 0.3 * grade_code
    return df


# --------------------------------------------------------------------------- figures


@dataclass
class Figure:
    """One contract figure: a ratio, its target and how it was obtained."""
    name: str
    value: float | None
    target: str
    passed: bool | None
    detail: dict = field(default_factory=dict)
    note: str = ""

    def line(self, timed: bool) -> str:
        mark = "n/a" if self.passed is None else ("pass" if self.passed else "SHORT")
        if not timed and self.passed is not None:
            mark = "(quick run: not judged)"
        shown = "not measured" if self.value is None else f"{self.value:,.3g}"
        text = f"{self.name:<48} {shown:>12}   target {self.target:<10} {mark}"
        return text + (f"\n    {self.note}" if self.note else "")


@dataclass
class Section:
    """What one benchmark section returns: its figures, the raw measurements behind them, and any
    extra lines for the terminal."""
    figures: list[Figure]
    raw: dict = field(default_factory=dict)
    sizes: dict = field(default_factory=dict)
    lines: list[str] = field(default_factory=list)


def judge(value: float | None, op: str, bound: float) -> bool | None:
    if value is None or not np.isfinite(value):
        return None
    return bool(value <= bound) if op == "<=" else bool(value >= bound) if op == ">=" else bool(value < bound)


# --------------------------------------------------------------------------- section options


def name_list(text: str | None, known, what: str) -> tuple[str, ...] | None:
    """Comma-separated names from a command-line option, each one of ``known`` (None if not given)."""
    if not text:
        return None
    names = tuple(x.strip() for x in text.split(",") if x.strip())
    unknown = [x for x in names if x not in known]
    if unknown or not names:
        raise InputError(f"{what} {text!r}: choose from {', '.join(known)}")
    return names


def int_list(text: str | None, what: str) -> tuple[int, ...] | None:
    """Comma-separated whole numbers from a command-line option (None if not given)."""
    if not text:
        return None
    try:
        values = tuple(int(x.strip().replace("_", "")) for x in text.split(",") if x.strip())
    except ValueError:
        raise InputError(f"{what} {text!r}: give comma-separated whole numbers, e.g. 0,1,2") from None
    if not values:
        raise InputError(f"{what} {text!r}: give comma-separated whole numbers, e.g. 0,1,2")
    return values


def settings(**kw):
    """``pipeline.Settings`` from the keywords it knows: sections keep running while the pipeline
    gains or drops options."""
    from ..pipeline import Settings
    known = {f.name for f in dataclasses.fields(Settings)}
    return Settings(**{k: v for k, v in kw.items() if k in known})


# --------------------------------------------------------------------------- child processes


def run_child(kind: str, config: dict) -> dict:
    """Run the child function registered as ``kind`` (``cli.CHILDREN``) in a fresh interpreter;
    return its JSON result, which includes its own maxrss."""
    with tempfile.NamedTemporaryFile("w", suffix=".json", delete=False) as fh:
        json.dump(config, fh)
        cfg = fh.name
    try:
        env = dict(os.environ)
        src = str(Path(__file__).resolve().parents[2])
        env["PYTHONPATH"] = src + (os.pathsep + env["PYTHONPATH"] if env.get("PYTHONPATH") else "")
        proc = subprocess.Popen([sys.executable, "-m", "pocketforest.bench", "--child", kind, cfg],
                                stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=env)
        out, err = proc.communicate()
        if proc.returncode != 0:
            raise RuntimeError(f"benchmark child '{kind}' failed:\n{err[-3000:]}")
        return json.loads(out.strip().splitlines()[-1])
    finally:
        os.remove(cfg)


def maxrss_mb() -> float:
    """Peak resident memory of this process so far, in MB.

    Linux's ``VmHWM`` belongs to the process's own address space, which ``exec`` renews; the
    older ``ru_maxrss`` also keeps the parent's resident size from the moment of ``fork``, so a
    child started by a large parent would report the parent's memory as its own.
    """
    try:
        for line in Path("/proc/self/status").read_text().splitlines():
            if line.startswith("VmHWM:"):
                return int(line.split()[1]) / 1024.0
    except OSError:
        pass
    import resource
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0


def best_of(fn, repeats: int) -> float:
    best = float("inf")
    fn()  # warm up
    for _ in range(repeats):
        t = time.perf_counter()
        fn()
        best = min(best, time.perf_counter() - t)
    return best


def median_of(fn, repeats: int) -> float:
    fn()
    times = []
    for _ in range(repeats):
        t = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t)
    return float(np.median(times))


def machine() -> dict:
    try:
        load = os.getloadavg()
    except OSError:
        load = None
    cpu = platform.processor() or ""
    try:
        for line in Path("/proc/cpuinfo").read_text().splitlines():
            if line.startswith("model name"):
                cpu = line.split(":", 1)[1].strip()
                break
    except OSError:
        pass
    import onnxruntime
    import sklearn
    return {"cpu": cpu, "cores": os.cpu_count(), "python": platform.python_version(),
            "platform": platform.platform(), "load_average_at_end": load,
            "scikit-learn": sklearn.__version__, "onnxruntime": onnxruntime.__version__}
