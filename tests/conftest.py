"""Shared small data sets and fitted bundles (session-scoped so the suite stays quick)."""
from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

ROOT = Path(__file__).resolve().parents[1]
SRC = ROOT / "src"


def chromium() -> str | None:
    """A headless-capable Chromium on PATH (CI installs the Debian package `chromium`), or None."""
    import shutil
    for name in ("chromium", "chromium-browser", "google-chrome", "chrome"):
        path = shutil.which(name)
        if path:
            return path
    return None


def screenshot(page: Path, shot: Path, size: tuple[int, int], tmp: Path) -> subprocess.CompletedProcess:
    """Render a local file in headless Chromium, offline, to a PNG of ``size`` (width, height)."""
    import tempfile
    profile = tempfile.mkdtemp(prefix="pf-chromium-", dir=tmp)
    cmd = [chromium(), "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
           "--disable-background-networking", "--disable-component-update", "--disable-sync",
           f"--user-data-dir={profile}", f"--screenshot={shot}", f"--window-size={size[0]},{size[1]}",
           page.resolve().as_uri()]
    return subprocess.run(cmd, capture_output=True, text=True, timeout=120, env=dict(os.environ, LANG="C.UTF-8"))


def run_cli(*args: str, cwd: Path | None = None) -> subprocess.CompletedProcess:
    """Run `python -m pocketforest ...` the way a user would, from source."""
    env = dict(os.environ, PYTHONPATH=str(SRC))
    return subprocess.run([sys.executable, "-m", "pocketforest", *args], capture_output=True, text=True,
                          cwd=cwd, env=env, timeout=600)


def synthetic_table(n: int = 600, seed: int = 1, task: str = "regression", n_classes: int = 2) -> pd.DataFrame:
    """Invented data with known truth: a bend in x1, an x2*x3 interaction, a category effect,
    a pure-noise column, and missing values in one numeric and one categorical column."""
    rng = np.random.default_rng(seed)
    x1, x2, x3, noise = (rng.uniform(-1, 1, n) for _ in range(4))
    colour = rng.choice(["red", "green", "blue"], n)
    site = rng.choice(["north", "south"], n)
    f = 2 * x1 ** 2 + 1.5 * x2 * x3 + x2 + np.where(colour == "red", 1.0, 0.0) + 0.5 * (site == "north")
    df = pd.DataFrame({"x1": x1, "x2": x2, "x3": x3, "noise": noise, "colour": colour, "site": site})
    if task == "regression":
        df["y"] = f + rng.normal(0, 0.3, n)
    elif n_classes == 2:
        df["y"] = np.where(rng.uniform(size=n) < 1 / (1 + np.exp(-2 * (f - f.mean()))), "yes", "no")
    else:
        cut = np.quantile(f + rng.normal(0, 0.3, n), [1 / 3, 2 / 3])
        df["y"] = np.array(["low", "mid", "high"])[np.searchsorted(cut, f + rng.normal(0, 0.3, n))]
    df.loc[rng.choice(n, n // 20, replace=False), "x3"] = np.nan
    df.loc[rng.choice(n, n // 25, replace=False), "colour"] = np.nan
    return df


@pytest.fixture(scope="session")
def fitted(tmp_path_factory) -> dict[str, tuple]:
    """(Distillation, bundle path) for regression, two classes and three classes, fitted once per
    test session; tests that compare a bundle with its fitted objects use the Distillation."""
    from pocketforest.intake import prepare
    from pocketforest.pipeline import Settings, distill

    out = {}
    base = tmp_path_factory.mktemp("bundles")
    for name, task, k in (("regression", "regression", 2), ("binary", "classification", 2),
                          ("multiclass", "classification", 3)):
        df = synthetic_table(task=task, n_classes=k)
        table = prepare(df, "y", source=f"{name}.csv")
        result = distill(table, Settings(trees=60, seed=3, quiet=True, bootstrap=200, nested_repeats=1))
        out[name] = (result, Path(result.write(base / name)))
    return out


@pytest.fixture(scope="session")
def bundles(fitted) -> dict[str, Path]:
    """The bundles of :func:`fitted`, by name."""
    return {name: path for name, (_, path) in fitted.items()}
