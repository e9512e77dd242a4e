"""Write the invented weekly series of the vineyard demo, sample_data/vineyard_weekly.csv.

The data are synthetic: no real vineyard, estate or sensor is behind them. The story (one estate
logging a few estate-level readings once a week for five years) only gives the columns names and
units. Every column is an autocorrelated series; the relationships listed in sample_data/README.md
("Weekly series") are planted, every other pair of columns is independent by construction, and
several unrelated pairs are strongly autocorrelated or trending, which is what makes row-level
tests call them related (Yule 1926; Granger & Newbold 1974) unless the rows are declared ordered.

Run ``python sample_data/make_vineyard_weekly.py`` to rewrite the committed CSV (byte-identical on
every run) or ``--out OTHER.csv`` to write elsewhere.
"""

from __future__ import annotations

import argparse
from pathlib import Path

import numpy as np
from scipy import signal

SEED = 27182
N_WEEKS = 260
DEFAULT_OUT = Path(__file__).resolve().parent / "vineyard_weekly.csv"

# Column name -> decimals written (0 = integer), in file order.
NUMERIC_FORMAT: dict[str, int] = {
    "week": 0,
    "rain_mm": 1,
    "soil_water_index": 2,
    "humidity_anomaly_pct": 2,
    "mildew_pressure": 2,
    "pump_hours": 1,
    "bird_visits": 1,
    "cellar_temp_c": 2,
    "reservoir_level_m": 2,
    "fuel_use_l": 1,
}


def _ar1(rng: np.random.Generator, phi: float, n: int, scale: float = 1.0) -> np.ndarray:
    """Stationary AR(1) with standard deviation ``scale``."""
    e = rng.normal(size=n) * scale * np.sqrt(1.0 - phi * phi)
    e[0] = rng.normal() * scale
    return signal.lfilter([1.0], [1.0, -phi], e)


def generate(seed: int = SEED) -> dict[str, np.ndarray]:
    names = ("rain", "soil", "humidity", "mildew", "pump", "birds", "cellar", "reservoir", "fuel")
    rng = dict(zip(names, (np.random.default_rng(s) for s in np.random.SeedSequence(seed).spawn(len(names)))))
    n = N_WEEKS
    rain_driver = _ar1(rng["rain"], 0.5, n)
    rain = np.maximum(0.0, 18.0 + 12.0 * rain_driver)
    # planted: the soil water index follows this and the previous weeks' rain (a persistent response)
    soil = 40.0 + signal.lfilter([1.0], [1.0, -0.7], 2.5 * rain_driver + rng["soil"].normal(size=n))
    humidity = _ar1(rng["humidity"], 0.8, n, 6.0)
    # planted: mildew pressure builds up under humid weeks
    mildew = 10.0 + signal.lfilter([1.0], [1.0, -0.6], 0.12 * humidity + rng["mildew"].normal(0.0, 0.8, n))
    return {
        "week": np.arange(1.0, n + 1),
        "rain_mm": rain,
        "soil_water_index": soil,
        "humidity_anomaly_pct": humidity,
        "mildew_pressure": mildew,
        # unrelated to everything, strongly autocorrelated
        "pump_hours": 30.0 + _ar1(rng["pump"], 0.9, n, 5.0),
        "bird_visits": 50.0 + _ar1(rng["birds"], 0.9, n, 8.0),
        "cellar_temp_c": 14.0 + _ar1(rng["cellar"], 0.95, n, 1.0),
        # unrelated random walks: trending
        "reservoir_level_m": 6.0 + np.cumsum(rng["reservoir"].normal(0.0, 0.08, n)),
        "fuel_use_l": 300.0 + np.cumsum(rng["fuel"].normal(0.0, 6.0, n)),
    }


def to_csv_text(columns: dict[str, np.ndarray]) -> str:
    lines = [",".join(NUMERIC_FORMAT)]
    for i in range(N_WEEKS):
        lines.append(",".join(f"{round(float(columns[c][i]), d) + 0.0:.{d}f}" for c, d in NUMERIC_FORMAT.items()))
    return "\n".join(lines) + "\n"


def write(path: Path, seed: int = SEED) -> Path:
    path = Path(path)
    path.write_bytes(to_csv_text(generate(seed)).encode("utf-8"))
    return path


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description="Write the invented weekly series of the vineyard demo.")
    parser.add_argument("--out", type=Path, default=DEFAULT_OUT,
                        help=f"output file (default: {DEFAULT_OUT.name} beside this script)")
    print(write(parser.parse_args(argv).out))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
