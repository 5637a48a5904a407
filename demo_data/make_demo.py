"""Generate the committed pocketforest demo table ``greenhouse_trial.csv``.

Why this exists: the toolkit needs a small, realistic-looking table whose TRUE
structure is known exactly (which variables matter, one two-way interaction,
one bend, pure-noise columns, an id column, missing values), so that tests and
examples can check that the forest -> GLM -> surrogate pipeline recovers it.
The scenario (a greenhouse tomato trial) is invented; the exact formulas are
documented in ``demo_data/README.md`` and mirrored in the constants below.

The script is deterministic: the same ``--rows`` always gives a byte-identical
CSV (seeded ``numpy.random.default_rng(20261201)``, fixed draw order, explicit
text formatting). Uses only the standard library, numpy and pandas.

Usage::

    python demo_data/make_demo.py                 # 3000 rows, beside this file
    python demo_data/make_demo.py --rows 500 --out /tmp/small.csv
"""

from __future__ import annotations

import argparse
from pathlib import Path

import numpy as np
import pandas as pd

SEED: int = 20261201
DEFAULT_ROWS: int = 3000
DEFAULT_OUT: Path = Path(__file__).resolve().parent / "greenhouse_trial.csv"

# --- categorical levels (drawn with equal probability) ----------------------
VARIETIES: tuple[str, ...] = ("Amberlee", "Corvina", "Fennick", "Ruddle")
SUBSTRATES: tuple[str, ...] = ("coir", "peat", "rockwool")
HOUSES: tuple[str, ...] = ("H1", "H2", "H3")

# --- true structure: yield_kg (kg per m2 over the trial season) -------------
YIELD_INTERCEPT: float = 38.0
YIELD_LINEAR: dict[str, tuple[float, float]] = {
    # column: (coefficient, centre)  -> coef * (x - centre)
    "irrigation_mm": (0.6, 5.0),
    "nitrogen_ppm": (0.02, 175.0),
    "light_hours": (0.8, 14.0),
    "co2_ppm": (0.006, 800.0),
    "soil_ph": (-2.0, 6.2),
}
YIELD_INTERACTION: float = 0.026  # * (irrigation_mm - 5) * (nitrogen_ppm - 175)
YIELD_BEND: float = -0.3  # * (night_temp_c - 17) ** 2
YIELD_VARIETY: dict[str, float] = {"Amberlee": 0.0, "Corvina": 2.0, "Fennick": -1.5, "Ruddle": 3.0}
YIELD_SUBSTRATE: dict[str, float] = {"coir": 0.0, "peat": -0.5, "rockwool": 1.0}
YIELD_NOISE_SD: float = 2.0

# --- true structure: marketable (logistic, P(yes) = 1 / (1 + exp(-eta))) -----
MKT_INTERCEPT: float = 0.6
MKT_LINEAR: dict[str, tuple[float, float]] = {
    "irrigation_mm": (0.30, 5.0),
    "nitrogen_ppm": (0.005, 175.0),
    "light_hours": (0.25, 14.0),
    "co2_ppm": (0.002, 800.0),
    "soil_ph": (-0.8, 6.2),
}
MKT_INTERACTION: float = 0.008  # * (irrigation_mm - 5) * (nitrogen_ppm - 175)
MKT_BEND: float = -0.12  # * (night_temp_c - 17) ** 2
MKT_VARIETY: dict[str, float] = {"Amberlee": 0.0, "Corvina": 0.6, "Fennick": -0.5, "Ruddle": 0.9}
MKT_SUBSTRATE: dict[str, float] = {"coir": 0.0, "peat": -0.2, "rockwool": 0.3}

# --- missingness (MCAR, exact counts, applied after the outcomes are drawn) --
MISSING_FRACTION: dict[str, float] = {"soil_ph": 0.03, "substrate": 0.04}

COLUMNS: tuple[str, ...] = (
    "plot_id",
    "variety",
    "substrate",
    "house",
    "night_temp_c",
    "irrigation_mm",
    "nitrogen_ppm",
    "light_hours",
    "co2_ppm",
    "soil_ph",
    "bench_row",
    "sensor_drift",
    "yield_kg",
    "marketable",
)

# decimals used when writing each numeric column (truth is computed on the
# rounded values, so the documented formulas hold exactly for the CSV values)
DECIMALS: dict[str, int] = {
    "night_temp_c": 1,
    "irrigation_mm": 2,
    "nitrogen_ppm": 1,
    "light_hours": 2,
    "co2_ppm": 0,
    "soil_ph": 2,
    "bench_row": 0,
    "sensor_drift": 3,
    "yield_kg": 2,
}


def _linear_predictor(
    df: pd.DataFrame,
    intercept: float,
    linear: dict[str, tuple[float, float]],
    interaction: float,
    bend: float,
    variety: dict[str, float],
    substrate: dict[str, float],
) -> np.ndarray:
    """Evaluate one documented true formula on complete (unmasked) data."""
    eta = np.full(len(df), intercept, dtype=float)
    for col, (coef, centre) in linear.items():
        eta += coef * (df[col].to_numpy() - centre)
    eta += interaction * (df["irrigation_mm"].to_numpy() - 5.0) * (df["nitrogen_ppm"].to_numpy() - 175.0)
    eta += bend * (df["night_temp_c"].to_numpy() - 17.0) ** 2
    eta += df["variety"].map(variety).to_numpy(dtype=float)
    eta += df["substrate"].map(substrate).to_numpy(dtype=float)
    return eta


def true_yield_mean(df: pd.DataFrame) -> np.ndarray:
    """Noise-free expected ``yield_kg`` for complete rows (see README)."""
    return _linear_predictor(
        df, YIELD_INTERCEPT, YIELD_LINEAR, YIELD_INTERACTION, YIELD_BEND, YIELD_VARIETY, YIELD_SUBSTRATE
    )


def true_marketable_logit(df: pd.DataFrame) -> np.ndarray:
    """Log-odds of ``marketable == "yes"`` for complete rows (see README)."""
    return _linear_predictor(
        df, MKT_INTERCEPT, MKT_LINEAR, MKT_INTERACTION, MKT_BEND, MKT_VARIETY, MKT_SUBSTRATE
    )


def generate(rows: int = DEFAULT_ROWS, seed: int = SEED) -> pd.DataFrame:
    """Return the demo table (with missing values as NaN / None).

    Draw order is fixed; changing it changes every value, so don't reorder.
    """
    if rows < 10:
        raise ValueError("rows must be at least 10")
    rng = np.random.default_rng(seed)

    # 1. predictors (raw draws)
    variety = rng.choice(np.array(VARIETIES), size=rows)
    substrate = rng.choice(np.array(SUBSTRATES), size=rows)
    house = rng.choice(np.array(HOUSES), size=rows)
    night_temp_c = rng.uniform(12.0, 22.0, size=rows)
    irrigation_mm = rng.uniform(2.0, 8.0, size=rows)
    nitrogen_ppm = rng.uniform(100.0, 250.0, size=rows)
    light_hours = rng.uniform(10.0, 18.0, size=rows)
    # the one mildly correlated pair: CO2 enrichment follows day length (r ~ 0.38)
    co2_ppm = np.clip(800.0 + 25.0 * (light_hours - 14.0) + rng.normal(0.0, 140.0, size=rows), 400.0, 1200.0)
    soil_ph = rng.normal(6.2, 0.35, size=rows)
    bench_row = rng.integers(1, 13, size=rows)  # pure noise, 1..12
    sensor_drift = rng.normal(0.0, 1.0, size=rows)  # pure noise

    df = pd.DataFrame(
        {
            "plot_id": [f"P{i:05d}" for i in range(1, rows + 1)],
            "variety": variety.astype(object),
            "substrate": substrate.astype(object),
            "house": house.astype(object),
            "night_temp_c": night_temp_c,
            "irrigation_mm": irrigation_mm,
            "nitrogen_ppm": nitrogen_ppm,
            "light_hours": light_hours,
            "co2_ppm": co2_ppm,
            "soil_ph": soil_ph,
            "bench_row": bench_row.astype(float),
            "sensor_drift": sensor_drift,
        }
    )
    # 2. round predictors to their written precision BEFORE computing the truth
    for col, dec in DECIMALS.items():
        if col in df.columns:
            df[col] = np.round(df[col].to_numpy(dtype=float), dec)

    # 3. outcomes
    yield_kg = true_yield_mean(df) + rng.normal(0.0, YIELD_NOISE_SD, size=rows)
    df["yield_kg"] = np.round(yield_kg, DECIMALS["yield_kg"])
    p_yes = 1.0 / (1.0 + np.exp(-true_marketable_logit(df)))
    df["marketable"] = np.where(rng.random(rows) < p_yes, "yes", "no").astype(object)

    # 4. missing completely at random, exact counts
    for col, frac in MISSING_FRACTION.items():
        idx = rng.choice(rows, size=int(round(frac * rows)), replace=False)
        if df[col].dtype == object:
            df.loc[idx, col] = None
        else:
            df.loc[idx, col] = np.nan
    return df[list(COLUMNS)]


def to_csv_text(df: pd.DataFrame) -> str:
    """Format the table as CSV text with fixed decimals; missing -> empty field."""
    out = pd.DataFrame(index=df.index)
    for col in COLUMNS:
        s = df[col]
        if col in DECIMALS:
            dec = DECIMALS[col]
            out[col] = [("" if pd.isna(v) else f"{v:.{dec}f}") for v in s]
        else:
            out[col] = ["" if v is None or (isinstance(v, float) and np.isnan(v)) else str(v) for v in s]
    return out.to_csv(index=False, lineterminator="\n")


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--out", type=Path, default=DEFAULT_OUT, help="output CSV path")
    parser.add_argument("--rows", type=int, default=DEFAULT_ROWS, help="number of rows (default 3000)")
    args = parser.parse_args(argv)
    text = to_csv_text(generate(args.rows))
    args.out.parent.mkdir(parents=True, exist_ok=True)
    with open(args.out, "w", encoding="utf-8", newline="") as fh:
        fh.write(text)
    print(f"wrote {args.rows} rows to {args.out}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
