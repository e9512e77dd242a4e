"""Write the invented vineyard demo table, sample_data/vineyard_blocks.csv.

The data are synthetic: no real vineyard, cooperative or sensor is behind them. Every
relationship in the file is planted here on purpose (see sample_data/README.md for the table
of planted pairs and the verdict each is meant to receive).

Run ``python sample_data/make_vineyard.py`` to rewrite the committed CSV (byte-identical on
every run) or ``python sample_data/make_vineyard.py --out OTHER.csv`` to write elsewhere.

Design choices that keep the planted structure clean:

* Each planted relationship lives in its own pair of columns, and every column is drawn from
  its own random stream. Columns from different pairs are therefore independent, so every
  pair not listed in the README is a true null.
* No column has a week trend or a block effect. Block-level columns (``slope_aspect_deg``,
  ``row_orientation``) repeat 24 times per block; if another column also had a block effect,
  row-level tests would see ~40 effective rows instead of 960 and call chance significant.
* The only randomness is ``numpy.random.default_rng`` seeded from ``SEED``.
"""

from __future__ import annotations

import argparse
from pathlib import Path

import numpy as np

SEED = 61803
# The confounded pair (evaporation_mm, leaf_stress_index) draws from its own generator, so adding it
# left every earlier column bit-identical.
SEED_CONFOUNDED = 271828
N_BLOCKS = 40
N_WEEKS = 24
MISSING_FRACTION = 0.05
FAULT_WEEK = 15          # week of the invented lab-batch fault behind the outlier pair
N_FAULT_ROWS = 4
ORIENTATIONS = ("N-S", "E-W", "NE-SW", "NW-SE")

DEFAULT_OUT = Path(__file__).resolve().parent / "vineyard_blocks.csv"

# Column name -> decimals written (0 = integer). Order here is the file's column order.
NUMERIC_FORMAT: dict[str, int] = {
    "week": 0,
    "slope_aspect_deg": 0,
    "soil_moisture_20cm": 2,
    "soil_moisture_60cm": 2,
    "canopy_temp_c": 2,
    "sugar_brix": 2,
    "irrigation_min": 0,
    "berry_weight_g": 3,
    "leaf_wetness_h": 1,
    "disease_score": 0,
    "acidity_g_l": 2,
    "yan_mg_l": 1,
    "dew_point_anomaly_c": 2,
    "canopy_humidity_anomaly_pct": 2,
    "sensor_drift_a": 3,
    "sensor_drift_b": 3,
    "trap_count_noise": 0,
    "gust_noise_kmh": 1,
    "evaporation_mm": 2,
    "leaf_stress_index": 2,
}
TEXT_COLUMNS = ("block_id", "row_orientation")
# Appended after every other column (issue 18), drawn from its own generator so that every
# earlier column stays bit-identical.
TRAILING_TEXT_COLUMNS = ("grape_variety",)
VARIETY_SEED = 161803
VARIETIES = ("Chardonnay", "Pinot noir", "Syrah")
VARIETY_STRENGTH = 1.6   # logit change per standard deviation of ripeness (sugar up, acidity down)

# One independent stream per purpose, so changing one column never shifts another.
_STREAMS = (
    "block", "soil", "canopy", "sugar", "irrigation", "berry", "wetness", "disease",
    "lab", "fault", "cross", "drift_a", "drift_b", "traps", "gusts", "missing_soil",
    "missing_canopy",
)


def _streams(seed: int) -> dict[str, np.random.Generator]:
    children = np.random.SeedSequence(seed).spawn(len(_STREAMS))
    return {name: np.random.default_rng(child) for name, child in zip(_STREAMS, children)}


def _balanced_signs(values: np.ndarray, rng: np.random.Generator) -> np.ndarray:
    """Random +/-1 per row, opposite within neighbouring pairs of |values|.

    Pairing rows of almost equal magnitude with opposite signs makes sum(sign * values**2)
    nearly zero, so the cross-shaped pair has a sample correlation near 0 by construction
    rather than by luck (with independent coin flips its sd would be about sqrt(3/n)).
    The sign still ignores the sign of ``values``, so sign * values keeps its normal law.
    """
    order = np.argsort(np.abs(values), kind="stable")
    signs = np.empty(values.size)
    first = rng.choice([-1.0, 1.0], size=values.size // 2)
    signs[order[0:2 * first.size:2]] = first
    signs[order[1:2 * first.size:2]] = -first
    if values.size % 2:
        signs[order[-1]] = rng.choice([-1.0, 1.0])
    return signs


def _blank_at_random(values: np.ndarray, rng: np.random.Generator) -> np.ndarray:
    """Blank a fixed share of cells, chosen completely at random (a fixed count, not a coin
    per cell, so the share is exactly MISSING_FRACTION whatever the seed)."""
    out = values.copy()
    out[rng.choice(values.size, size=round(MISSING_FRACTION * values.size), replace=False)] = np.nan
    return out


def generate(seed: int = SEED) -> dict[str, np.ndarray]:
    """All columns of the demo table as arrays of equal length (NaN = blank cell)."""
    rng = _streams(seed)
    n = N_BLOCKS * N_WEEKS
    block_index = np.repeat(np.arange(N_BLOCKS), N_WEEKS)
    week = np.tile(np.arange(1, N_WEEKS + 1), N_BLOCKS)

    # Block-level attributes: fixed per block, unrelated to every measured column.
    aspect_per_block = rng["block"].integers(0, 360, size=N_BLOCKS)
    orientation_per_block = rng["block"].integers(0, len(ORIENTATIONS), size=N_BLOCKS)

    # Linear: the 60 cm probe follows the 20 cm probe, r = 0.8 * 5 / sqrt(16 + 9) = 0.8.
    soil_20 = rng["soil"].normal(27.0, 5.0, n)
    soil_60 = 10.0 + 0.8 * soil_20 + rng["soil"].normal(0.0, 3.0, n)

    # Monotone but curved: sugar saturates with canopy warmth (plateau above ~26 C).
    canopy_temp = rng["canopy"].uniform(16.0, 34.0, n)
    sugar = (12.0 + 14.0 * (1.0 - np.exp(-(canopy_temp - 16.0) / 3.0))
             + rng["sugar"].normal(0.0, 0.15, n))

    # Non-monotone: berries heaviest at moderate irrigation. The vertex is the value that
    # makes the parabola exactly uncorrelated with irrigation in this sample (close to the
    # middle of the 0-240 min range), so Pearson r is ~0 by construction.
    irrigation = np.round(rng["irrigation"].uniform(0.0, 240.0, n))
    vertex = np.cov(irrigation, irrigation**2)[0, 1] / (2.0 * irrigation.var(ddof=1))
    berry = (1.9 - 0.6 * ((irrigation - vertex) / 120.0) ** 2
             + rng["berry"].normal(0.0, 0.06, n))

    # Heavy ties: a 0-5 integer score rising steadily with leaf wetness; six levels over
    # 960 rows, so every rank statistic has to handle large tied groups.
    leaf_wetness = rng["wetness"].uniform(0.0, 72.0, n)
    latent = 5.5 * leaf_wetness / 72.0
    disease = np.clip(np.round(latent + rng["disease"].normal(0.0, 0.65, n)), 0, 5)

    # Driven by a few points: independent lab values, except one invented faulty lab batch
    # (a few blocks in one week) that reported extreme values for both.
    acidity = rng["lab"].normal(7.0, 0.8, n)
    yan = rng["lab"].normal(180.0, 40.0, n)
    fault_blocks = rng["fault"].choice(N_BLOCKS, size=N_FAULT_ROWS, replace=False)
    fault_rows = np.sort(fault_blocks * N_WEEKS + (FAULT_WEEK - 1))
    acidity[fault_rows] = rng["fault"].uniform(15.5, 17.5, N_FAULT_ROWS)
    yan[fault_rows] = rng["fault"].uniform(600.0, 700.0, N_FAULT_ROWS)

    # Cross-shaped mixture: normal marginals, zero correlation, strong dependence.
    dew_anomaly = rng["cross"].normal(0.0, 1.5, n)
    humidity_anomaly = (4.0 * _balanced_signs(dew_anomaly, rng["cross"]) * dew_anomaly
                        + rng["cross"].normal(0.0, 0.6, n))

    columns: dict[str, np.ndarray] = {
        "block_id": np.array([f"B{b + 1:02d}" for b in block_index]),
        "row_orientation": np.array(ORIENTATIONS)[orientation_per_block[block_index]],
        "week": week.astype(float),
        "slope_aspect_deg": aspect_per_block[block_index].astype(float),
        "soil_moisture_20cm": soil_20,
        "soil_moisture_60cm": _blank_at_random(soil_60, rng["missing_soil"]),
        "canopy_temp_c": _blank_at_random(canopy_temp, rng["missing_canopy"]),
        "sugar_brix": sugar,
        "irrigation_min": irrigation,
        "berry_weight_g": berry,
        "leaf_wetness_h": leaf_wetness,
        "disease_score": disease,
        "acidity_g_l": acidity,
        "yan_mg_l": yan,
        "dew_point_anomaly_c": dew_anomaly,
        "canopy_humidity_anomaly_pct": humidity_anomaly,
        # Pure noise, each from its own stream and with a different shape of distribution.
        "sensor_drift_a": rng["drift_a"].normal(0.0, 0.5, n),
        "sensor_drift_b": rng["drift_b"].uniform(-1.0, 1.0, n),
        "trap_count_noise": rng["traps"].poisson(6.0, n).astype(float),
        "gust_noise_kmh": rng["gusts"].gamma(3.0, 4.0, n),
    }
    # Confounded: evaporation and leaf stress both follow canopy temperature and nothing else ties
    # them, so they correlate (r about 0.5) only through it; given canopy_temp_c the partial
    # correlation is about 0. Drawn from the true temperatures (before blanking).
    extra = np.random.default_rng(SEED_CONFOUNDED if seed == SEED else [seed, SEED_CONFOUNDED])
    columns["evaporation_mm"] = 0.2 * canopy_temp + extra.normal(0.0, 1.0, n)
    columns["leaf_stress_index"] = 0.1 * canopy_temp + extra.normal(0.0, 0.5, n)
    columns["grape_variety"] = _variety(sugar, acidity)
    return columns


def _variety(sugar: np.ndarray, acidity: np.ndarray) -> np.ndarray:
    """The grape variety of each row's sampled vines (blocks are invented mixed plantings).

    Drawn from its own generator (``VARIETY_SEED``) given the ripeness of the row: the later a
    variety ripens (Chardonnay < Pinot noir < Syrah here, invented), the higher the sugar and the
    lower the acidity of its rows. Drawing the label given the measurements, not the other way
    round, leaves every existing column untouched; the joint law is what an analyst would see if
    the variety drove sugar and acidity. Variety is thereby also tied to canopy temperature
    (through sugar) and, through the four fault rows, barely to yeast nitrogen.
    """
    rng = np.random.default_rng(VARIETY_SEED)
    # ranks, not raw values: the sugar plateau and the acidity fault rows should not dominate
    def z(v):
        r = np.argsort(np.argsort(v, kind="stable"), kind="stable")
        return (r - r.mean()) / r.std()
    ripeness = (z(sugar) - z(acidity)) / np.sqrt(2.0)
    logits = VARIETY_STRENGTH * np.outer(ripeness, np.array([-1.0, 0.0, 1.0]))
    gumbel = -np.log(-np.log(rng.uniform(size=logits.shape)))   # Gumbel-max draws the softmax choice
    return np.array(VARIETIES)[np.argmax(logits + gumbel, axis=1)]


def _format_cell(value: float, decimals: int) -> str:
    if np.isnan(value):
        return ""
    # Adding 0.0 turns a rounded -0.0 into 0.0 so no "-0.00" cells appear.
    return f"{round(float(value), decimals) + 0.0:.{decimals}f}"


def to_csv_text(columns: dict[str, np.ndarray]) -> str:
    names = list(TEXT_COLUMNS) + list(NUMERIC_FORMAT) + list(TRAILING_TEXT_COLUMNS)
    lines = [",".join(names)]
    n = len(columns["block_id"])
    for i in range(n):
        cells = [str(columns[name][i]) for name in TEXT_COLUMNS]
        cells += [_format_cell(columns[name][i], NUMERIC_FORMAT[name]) for name in NUMERIC_FORMAT]
        cells += [str(columns[name][i]) for name in TRAILING_TEXT_COLUMNS]
        lines.append(",".join(cells))
    return "\n".join(lines) + "\n"


def write(path: Path, seed: int = SEED) -> Path:
    path = Path(path)
    path.write_bytes(to_csv_text(generate(seed)).encode("utf-8"))
    return path


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description="Write the invented vineyard demo CSV.")
    parser.add_argument("--out", type=Path, default=DEFAULT_OUT,
                        help=f"output file (default: {DEFAULT_OUT.name} beside this script)")
    args = parser.parse_args(argv)
    print(write(args.out))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
