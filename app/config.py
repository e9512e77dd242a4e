"""Every setting and limit of pairlens, in one place."""

from __future__ import annotations

import os
from dataclasses import dataclass
from pathlib import Path


def _env_int(name: str, default: int) -> int:
    """A limit a user may raise (or lower) with an environment variable; bad values keep the default."""
    try:
        value = int(os.environ.get(name, ""))
    except ValueError:
        return default
    return value if value > 0 else default


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

# A numeric column of whole numbers with at most this many distinct values (and at least
# CLASS_CODE_MIN_ROWS rows, or only two values) looks like a class code (0/1, 1..3): it is
# still treated as a number, but flagged, and its pairs' verdicts say the Gaussian picture
# (ellipses, conditional band, Gaussian-implied values) does not apply. Our own thresholds.
CLASS_CODE_MAX_LEVELS = 5
CLASS_CODE_MIN_ROWS = 50

# Comma-separated Python modules imported by the CLI, the server and its analysis children
# before they read measure names; each registers measures of its own (pairlens.plugins).
PLUGINS_ENV = "PAIRLENS_PLUGINS"

# Categorical columns (issue 18) ------------------------------------------
# Column kinds: a text column with at most CATEGORICAL_MAX_LEVELS distinct values (and at most
# half as many values as filled cells) is kept as a categorical column; a numeric column that
# looks like a class code (the rule above) is analysed as categorical unless --numeric names it.
# More levels than this make a column too fragmented for a contingency table or a one-way
# comparison at the row counts pairlens is built for; the user is told how to raise the limit
# (PAIRLENS_CATEGORICAL_MAX_LEVELS) or to merge levels. Our own choice.
CATEGORICAL_MAX_LEVELS = _env_int("PAIRLENS_CATEGORICAL_MAX_LEVELS", 20)
# --categorical may name any numeric column with at most this many distinct values.
CATEGORICAL_OVERRIDE_MAX_LEVELS = _env_int("PAIRLENS_CATEGORICAL_MAX_LEVELS", 20)
# Measures added to a run for the pairs with a categorical side when --measures lists none of
# them (the numeric measures never run on a categorical column).
DEFAULT_CATEGORICAL_MEASURES: tuple[str, ...] = ("cramer_v", "eta", "kruskal")
# The chi-square test of a contingency table uses the chi-square law unless Cochran's (1954)
# rule fails (an expected count below 1, or more than 20 % of them below 5); then a permutation
# test with this many relabellings.
CHI2_MIN_EXPECTED = 5.0
CHI2_SMALL_SHARE = 0.2
CATEGORICAL_PERMUTATIONS = 1_999

# The t-test's p-value on large arrays (linear.correlation_t_pvalue, method "series"): the finite
# series up to this many degrees of freedom (df/2 multiply-adds a pair), and only where it gives p
# above the bound; below it 1 - S loses digits and the incomplete beta function is used. Measured
# against scipy.stats.t.sf: at most 2e-10 relative at this bound and 400 df (1.4e-9 at 1e-6).
T_SERIES_MAX_DF = 400
T_SERIES_MIN_P = 1e-5

# Limits ------------------------------------------------------------------
MAX_UPLOAD_MB = 200
# Bodies of requests other than uploads (JSON settings, forms) are small; a larger
# one is refused with 413 instead of being buffered.
MAX_REQUEST_BODY_KB = 1024
MAX_ROWS = _env_int("PAIRLENS_MAX_ROWS", 5_000_000)
MAX_COLUMNS = _env_int("PAIRLENS_MAX_COLUMNS", 5_000)   # the matrix path with --top takes more (bench_wide.py)
# Cells (rows x columns of the file, every column) read from one file: the float64 table alone
# is 8 bytes a cell, the parsers need several times that while they work.
MAX_CELLS = _env_int("PAIRLENS_MAX_CELLS", 20_000_000)
# Workbook cells are parsed one XML element at a time (about 100,000 a second), so their limit
# is lower; the sheet's declared dimension is checked before any row is read.
MAX_XLSX_CELLS = _env_int("PAIRLENS_MAX_XLSX_CELLS", 2_000_000)
# Text (a .csv, or what a .csv.gz inflates to) may not be larger than this; the inflated bytes
# and lines are counted while decompressing, so a gzip bomb stops at the limit.
MAX_DECOMPRESSED_MB = _env_int("PAIRLENS_MAX_TEXT_MB", 400)
# The server parses every upload in a child process with this much memory (on top of what
# the child has mapped at start, RLIMIT_AS) and this long; a file that needs more is refused.
PARSE_MEMORY_MB = _env_int("PAIRLENS_PARSE_MEMORY_MB", 900)
PARSE_SECONDS = _env_int("PAIRLENS_PARSE_SECONDS", 120)
# Work budget of one analysis. The estimate, made before anything runs, is
#   seconds = pairs x measures x (PAIR_OVERHEAD_ROWS + rows x (1 + permutations)) / WORK_UNITS_PER_SECOND
# on one core: every pair and measure has a fixed cost (tests, intervals, bookkeeping; about
# 0.4 ms, i.e. PAIR_OVERHEAD_ROWS rows) and each resample costs about as much per row as the
# statistic. Measured on this project's engine on a busy 2-core machine (default measures,
# n = 3 x 100 columns: 0.39 ms per pair and measure; n = 20,000 x 4 columns: 7.7 ms).
# An analysis estimated beyond WORK_BUDGET_SECONDS is refused with the estimate and the options
# that shrink it; raise the budget with PAIRLENS_WORK_BUDGET_SECONDS.
PAIR_OVERHEAD_ROWS = 1_000
WORK_UNITS_PER_SECOND = 2_500_000
WORK_BUDGET_SECONDS = _env_int("PAIRLENS_WORK_BUDGET_SECONDS", 7_200)
# Rows of the pair table (pairs x measures) one analysis may produce: each is stored and shown.
MAX_PAIR_ROWS = _env_int("PAIRLENS_MAX_PAIR_ROWS", 2_000_000)
# A text column counts as numeric when at least this share of its non-missing cells are
# numbers; the others become missing with a note (app/ingest.py).
NUMERIC_MIN_SHARE = 0.95
MAX_PERMUTATIONS = 100_000
# The pair-view cache of the server holds at most this many bytes (points kept as arrays).
PAIR_CACHE_MB = 64
# Parsed tables the server keeps in memory (the latest one is always kept).
TABLE_CACHE_MB = 400
# Column groups need pairwise distances; above this many rows the n x n
# blocks would not fit comfortably in memory, so the user is told to sample.
MAX_GROUP_ROWS = 20_000
# Above this many points the pair view draws a density layer under a sample.
SCATTER_DENSITY_THRESHOLD = 20_000
# Kendall's exact null distribution is used up to this many untied rows (and
# beyond it when at most one pair is discordant or concordant): the same rule
# as scipy.stats.kendalltau(method="auto"), so the two agree.
KENDALL_EXACT_MAX_N = 33
# Spearman's default p-value (app/core/rank.py). Untied rows up to this many: the exact
# permutation law of sum d^2, counted by a subset recursion (2^n n^3 steps; 12 rows take
# about 0.1 s once, then cached).
SPEARMAN_EXACT_MAX_N = 12
# Tied rows up to this many: the exact permutation law of the mid-rank statistic, counted
# for each pair (its scores differ from pair to pair).
SPEARMAN_TIED_EXACT_MAX_N = 10
# From this many rows on, the t approximation with n-2 df; below it untied rows use the
# Edgeworth series of Best & Roberts (1975, AS 89) and tied rows a seeded permutation test.
# Chosen by the level the t approximation holds against the permutation law of untied ranks
# (benchmarks/spearman_level.py, 10^7 permutations per n): its rejection rate at
# alpha = 0.001 is 1.07 alpha at n = 100, 1.03 alpha at 125, 1.02 alpha at 150 (at 0.05, 0.01
# and 0.005 within 1.01 alpha from 150): the first n tried within 5% at every alpha, with margin.
SPEARMAN_T_MIN_N = 150
SPEARMAN_SMALL_N_PERMUTATIONS = 9999
# Tied rows take that permutation test only up to this many rows; from the next row on, the
# t approximation, as for 150 rows and more. Why: the permutation test costs B x n per pair
# (measured 17-46 ms per pair at n = 40-100, 180x Kendall's exact-or-normal test), so a
# 100-row table of survey scores with 300 columns would spend half an hour on Spearman alone;
# the t approximation's worst excess is at the smallest n, which stays covered.
SPEARMAN_TIED_PERMUTATION_MAX_N = 29
# Every default p-value is raised, where an approximation puts it lower, to the smallest
# value a permutation test on the rows allows (pairlens.core.testing.permutation_floor). Above
# this many rows that floor is 0 in float64 for all but almost wholly tied columns, and is
# not computed.
PVALUE_FLOOR_MAX_N = 1000
# Up to this many rows the floor is the exact smallest p-value of the measure's permutation
# law, found by computing its statistic for all n! pairings (8! = 40,320; vectorised, a few
# milliseconds); above it the floor is 2 K / n!, K the pairings that reproduce the rows.
PVALUE_FLOOR_ENUMERATE_MAX_N = 8
# Pearson's default p-value (app/core/linear.py): every relabelling is enumerated up to
# this many rows (7! = 5040); up to PEARSON_SPLIT_MAX_N rows, or when one point holds more
# than PEARSON_SPLIT_SHARE of a column's sum of squares, the moment curve is applied to the
# n parts of the permutation law given the partner of the most extreme value, else to the
# whole law (chosen by the level table in tests/core/test_levels_pearson.py and the agreement
# with scipy.stats.permutation_test in tests/core/test_pearson_moments.py).
PEARSON_EXACT_MAX_N = 7
PEARSON_SPLIT_MAX_N = 60
PEARSON_SPLIT_SHARE = 0.1
# Above 2 * PEARSON_SPLIT_GROUPS rows the n parts of the split law are taken in that many
# groups of the partner's sorted values, narrow at both ends (single values) and wider in the
# middle, two nodes each (O(n log n) a pair instead of n curves; tests/core/test_pearson_moments.py
# bounds the change against the n-part law).
PEARSON_SPLIT_GROUPS = 64
# When, beside the split point, one more point (on either side) holds more than this share of
# its column's sum of squares, the law is split on the partners of both points (columns with
# two dominant values, e.g. mostly zeros with two large values).
PEARSON_SPLIT2_SHARE = 0.25
# ... its partners then in this many bins a side (P^2 parts, P = 2 * bins)
PEARSON_SPLIT2_GROUPS = 16
# The matrix path (app/core/wide.py, issue 19): Pearson and Spearman of all pairs by matrix
# products. path="auto" takes it from this many pairs on (fewer pairs finish quickly either way),
# when every chosen measure has a matrix form and no column group is involved.
MATRIX_PATH_MIN_PAIRS = 5_000
# Pair-table rows a matrix-path run may give when its output is streamed to a file (the CLI):
# the table is held as arrays (about 70 bytes a row), not as stored rows, so the limit of
# MAX_PAIR_ROWS (rows stored and shown by the workspace) does not apply there.
MATRIX_MAX_PAIR_ROWS = _env_int("PAIRLENS_MATRIX_MAX_PAIR_ROWS", 30_000_000)
# Resamples of a permutation test chosen with --test MEASURE=permutation when
# --permutations is not given.
DEFAULT_TEST_PERMUTATIONS = 9_999
# Rows in time order (--ordered): block relabellings of the block permutation test, and the rows
# up to which it evaluates them as n x n matrices (beyond: the measure's own estimate per relabelling).
SERIAL_PERMUTATIONS = 499
SERIAL_MATRIX_MAX_N = 1500
SERIAL_BLOCK_FACTOR = 2.0          # blocks of twice the Politis-White length (chosen by the README's level table)
# Columns whose Ljung-Box p-value is below this count as serially dependent; the warning without
# --ordered appears when at least SERIAL_WARN_SHARE of the columns (and at least 2) are.
SERIAL_LJUNG_BOX_LEVEL = 0.01
SERIAL_WARN_SHARE = 0.25
SERIAL_XCORR_LAGS = 5              # cross-correlation lags each way in the pair view
SERIAL_CHECK_MAX_ROWS = 20_000    # the check looks at the first rows only

# Server ------------------------------------------------------------------
DEFAULT_HOST = "127.0.0.1"
DEFAULT_PORT = 8000
MAX_CONCURRENT_ANALYSES = 2
# Keep one analysis process started ahead whenever another analysis could start (engine imported,
# kernels loaded): measured 4-7 s of the demo's Run-to-maps under load were this start-up.
STANDBY_CHILD = True
# A cancelled analysis that has not stopped after this long is terminated.
CANCEL_GRACE_SECONDS = 3.0
# Every server on a workspace checks this often whether the owners of running analyses are
# alive (their owner lock), so a killed server's analyses end as interrupted without a restart.
OWNER_SWEEP_SECONDS = 2.0
# An analysis process checks this often that its server is alive, and stops when it is gone.
PARENT_POLL_SECONDS = 0.5

PACKAGE_DIR = Path(__file__).resolve().parent
PROJECT_DIR = PACKAGE_DIR.parent


def _data_folder(name: str) -> Path:
    # An installed wheel carries the folder inside the package (pyproject.toml maps it
    # there); a checkout, editable install included, keeps it beside app/.
    inside = PACKAGE_DIR / name
    return inside if inside.is_dir() else PROJECT_DIR / name


TEMPLATES_DIR = _data_folder("templates")
STATIC_DIR = _data_folder("static")
SAMPLE_DATA_DIR = _data_folder("sample_data")
DEMO_FILE = SAMPLE_DATA_DIR / "vineyard_blocks.csv"


def default_port() -> int:
    """Port ``pairlens serve`` listens on when ``--port`` is not given.

    ``PAIRLENS_PORT`` overrides it, so a second dashboard (or a test running the README's
    command verbatim) can start while something else holds port 8000.
    """
    env = os.environ.get("PAIRLENS_PORT", "").strip()
    if not env:
        return DEFAULT_PORT
    if not env.isdigit() or not 0 < int(env) < 65536:
        raise ValueError(f"PAIRLENS_PORT must be a port number from 1 to 65535, not {env!r}")
    return int(env)


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

# Association given other columns (--given COL,...; pairlens.core.partial)
PARTIAL_DCOR_PERMUTATIONS = 199   # relabellings of the partial distance correlation test without --permutations
PARTIAL_DCOR_MAX_N = 1000         # its n x n matrices and O(B n^2) test: NaN with a note beyond this many rows
GIVEN_INDICATOR_MAX_LEVELS = 6    # a numeric given column with at most this many distinct values is a class code
GIVEN_MAX_COLUMNS = 20            # at most this many conditioning columns
GIVEN_MAX_LEVELS = 50             # a class-code given column (text) with more levels is refused
