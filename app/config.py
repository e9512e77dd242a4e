"""Every setting and limit of pairlens, in one place."""

from __future__ import annotations

import os
from dataclasses import dataclass
from pathlib import Path

# Analysis defaults -------------------------------------------------------
DEFAULT_MEASURES: tuple[str, ...] = ("pearson", "spearman", "kendall", "dcor")
DEFAULT_CONFIDENCE = 0.95
DEFAULT_ADJUST = "bh"
DEFAULT_MISSING = "pairwise"
DEFAULT_SEED = 20261201
ADJUST_METHODS: tuple[str, ...] = ("bh", "holm", "none")
MISSING_POLICIES: tuple[str, ...] = ("pairwise", "complete")
MIN_ROWS = 3                      # fewer usable rows than this gives NaN with a note
SIGNIFICANCE_LEVEL = 0.05         # q-value below which a pair counts as significant

# Limits ------------------------------------------------------------------
MAX_UPLOAD_MB = 200
# Bodies of requests other than uploads (JSON settings, forms) are small; a larger
# one is refused with 413 instead of being buffered.
MAX_REQUEST_BODY_KB = 1024
MAX_ROWS = 5_000_000
MAX_COLUMNS = 5_000
# A .csv.gz may not decompress to more than this (guards against gzip bombs).
MAX_DECOMPRESSED_MB = 2_048
# A text column counts as numeric when at least this share of its non-missing cells are
# numbers; the others become missing with a note (app/ingest.py).
NUMERIC_MIN_SHARE = 0.95
MAX_PERMUTATIONS = 100_000
# Column groups need pairwise distances; above this many rows the n x n
# blocks would not fit comfortably in memory, so the user is told to sample.
MAX_GROUP_ROWS = 20_000
# Above this many points the pair view draws a density layer under a sample.
SCATTER_DENSITY_THRESHOLD = 20_000
# Kendall's exact null distribution is used up to this many untied rows (and
# beyond it when at most one pair is discordant or concordant): the same rule
# as scipy.stats.kendalltau(method="auto"), so the two agree.
KENDALL_EXACT_MAX_N = 33
# Pearson's default p-value (app/core/linear.py): every relabelling is enumerated up to
# this many rows (7! = 5040); up to PEARSON_SPLIT_MAX_N rows, or when one point holds more
# than PEARSON_SPLIT_SHARE of a column's sum of squares, the moment curve is applied to the
# n parts of the permutation law given the partner of the most extreme value, else to the
# whole law (chosen by the level table in tests/test_levels_pearson.py and the agreement
# with scipy.stats.permutation_test in tests/test_pearson_moments.py).
PEARSON_EXACT_MAX_N = 7
PEARSON_SPLIT_MAX_N = 60
PEARSON_SPLIT_SHARE = 0.1
# Resamples of a permutation test chosen with --test MEASURE=permutation when
# --permutations is not given.
DEFAULT_TEST_PERMUTATIONS = 9_999

# Server ------------------------------------------------------------------
DEFAULT_HOST = "127.0.0.1"
DEFAULT_PORT = 8000
MAX_CONCURRENT_ANALYSES = 2
# After the pair table the background job labels pairs (app.core.verdict) for this
# long at most, most significant pairs first; the rest get their label when their
# pair view opens. Measured: about 50 ms per pair at n = 960 (153 pairs in 8 s).
VERDICT_BUDGET_SECONDS = 10.0
# A cancelled analysis that has not stopped after this long is terminated.
CANCEL_GRACE_SECONDS = 3.0

PACKAGE_DIR = Path(__file__).resolve().parent
PROJECT_DIR = PACKAGE_DIR.parent
TEMPLATES_DIR = PROJECT_DIR / "templates"
STATIC_DIR = PROJECT_DIR / "static"
SAMPLE_DATA_DIR = PROJECT_DIR / "sample_data"
DEMO_FILE = SAMPLE_DATA_DIR / "vineyard_blocks.csv"


def default_data_dir() -> Path:
    """Per-user workspace directory (``PAIRLENS_DATA_DIR`` overrides it)."""
    env = os.environ.get("PAIRLENS_DATA_DIR")
    if env:
        return Path(env)
    try:
        from platformdirs import user_data_dir

        return Path(user_data_dir("pairlens", appauthor=False))
    except ImportError:  # pragma: no cover - platformdirs is a dependency
        return Path.home() / ".local" / "share" / "pairlens"


@dataclass(frozen=True)
class ServerSettings:
    host: str = DEFAULT_HOST
    port: int = DEFAULT_PORT
    data_dir: Path | None = None
    max_upload_mb: int = MAX_UPLOAD_MB
    demo: bool = False
    token: str | None = None
    cluster: str | None = None

# Chatterjee xi ----------------------------------------------------------
# Below this many rows the default xi p-value comes from permutations: the
# asymptotic normal law is conservative there (about 2% rejections at the 5%
# level for n = 10 in our simulation).
XI_PERMUTATION_BELOW_N = 20
XI_SMALL_N_PERMUTATIONS = 9999

# Gaussian fit -----------------------------------------------------------
# Henze-Zirkler needs all pairwise Mahalanobis distances (O(n^2) time); above
# this many rows it runs on a seeded random subsample of this size.
HZ_MAX_ROWS = 5000
# Shapiro-Wilk up to this many rows, D'Agostino-Pearson above (scipy's
# Shapiro-Wilk p-value is documented as approximate beyond 5000).
SHAPIRO_MAX_ROWS = 5000

# Dask cluster -------------------------------------------------------------
# How long to try reaching a scheduler given with --cluster before giving up
# with a one-line error, and how long to wait for its first worker.
DASK_CONNECT_TIMEOUT_SECONDS = 10.0
DASK_WORKER_WAIT_SECONDS = 10.0
# Retries of a tile whose task raised on a worker (a tile lost with a dead
# worker is rescheduled by Dask without using a retry).
DASK_TASK_RETRIES = 2
