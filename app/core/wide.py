"""Pearson and Spearman for every pair of columns of a wide table, by matrix products.

The per-pair kernels (:func:`pairlens.core.linear.pearson`,
:func:`pairlens.core.rank.spearman`) stay the reference: this module gives the
same estimates, p-values, intervals and notes for all pairs at once, from a few
BLAS products per block of columns and elementwise array work, with no Python
work per pair. The pairs whose default test needs the rows themselves are
marked ``fallback`` (the caller runs the per-pair kernel on them) or, for
Pearson's split rule, batched through the per-pair kernel here; the counts are
reported in :attr:`WidePairs.counts`.

Missing values: a column with any missing (or infinite) value is
"incomplete". Pairs of two complete columns take every path here. For pairs
touching an incomplete column, Pearson's r, rows used, interval, t p-value
and the power sums of the default (moment) p-value come from masked products
(:func:`pairlens.core.linear.pearson_matrix`'s algebra); Spearman (ranks
among the pair's own rows) is marked ``fallback``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from functools import lru_cache

import numpy as np
from scipy import special

from .jit import kernel
from .. import config
from . import linear, rank

__all__ = ["MeasureArrays", "WidePairs", "WideCancelled", "WIDE_MEASURES", "fisher_intervals", "head_adjusted",
           "key_histogram", "KEY_BINS", "pair_blocks", "pair_matrix"]

# Measures this module computes (the engine takes the matrix path only when every chosen measure is here).
WIDE_MEASURES = ("pearson", "spearman")
# Spearman's score products are exact integers in float64 while n^3 < 2^53.
_SPEARMAN_EXACT_MAX_N = 200_000
_LOG_FACT_CACHE: dict = {}


# --- private helpers ------------------------------------------------------------------

class _Labels:
    """Strings stored once, pairs holding small integer codes."""

    def __init__(self, first: str = "") -> None:
        self.items: list[str] = [first]
        self._index = {first: 0}

    def code(self, text: str) -> int:
        if text not in self._index:
            self._index[text] = len(self.items)
            self.items.append(text)
        return self._index[text]


@kernel(cache=True, nogil=True)
def _joint_log_mult(dense, levels, pi, pj):
    """sum log(m!) over the groups of equal (x, y) rows of each listed pair (dense integer codes)."""
    out = np.zeros(pi.shape[0])
    n = dense.shape[0]
    for k in range(pi.shape[0]):
        a = dense[:, pi[k]]
        b = dense[:, pj[k]]
        codes = np.empty(n, np.int64)
        for r in range(n):
            codes[r] = a[r] * levels + b[r]
        codes.sort()
        total = 0.0
        run = 1
        for r in range(1, n + 1):
            if r < n and codes[r] == codes[r - 1]:
                run += 1
            else:
                if run > 1:
                    total += math.lgamma(run + 1.0)
                run = 1
        out[k] = total
    return out


def _fisher_interval(est: np.ndarray, se: np.ndarray, confidence: float) -> tuple[np.ndarray, np.ndarray]:
    """:func:`pairlens.core.testing.fisher_z_interval` over arrays."""
    half = float(special.ndtri(0.5 + confidence / 2.0))
    r = np.clip(est, -1.0, 1.0)
    with np.errstate(divide="ignore", invalid="ignore"):
        z = np.arctanh(r)
        low = np.tanh(z - half * se)
        high = np.tanh(z + half * se)
    edge = np.abs(r) == 1.0
    low = np.where(edge, r, low)
    high = np.where(edge, r, high)
    whole = np.isinf(se)
    low = np.where(whole, -1.0, low)
    high = np.where(whole, 1.0, high)
    bad = np.isnan(est) | np.isnan(se)
    return np.where(bad, np.nan, low), np.where(bad, np.nan, high)


def fisher_intervals(measure: str, est: np.ndarray, n: np.ndarray, confidence: float):
    """The per-pair kernels' Fisher z intervals over arrays: se 1/sqrt(n-3) (Pearson) or
    sqrt((1 + rho^2/2)/(n-3)) (Spearman, Bonett & Wright 2000); the whole range up to 3 rows."""
    n = np.asarray(n)
    with np.errstate(divide="ignore", invalid="ignore"):
        if measure == "pearson":
            se = np.where(n > 3, 1.0 / np.sqrt(np.maximum(n, 4) - 3.0), np.inf)
        else:
            se = np.where(n > 3, np.sqrt((1.0 + est * est / 2.0) / (np.maximum(n, 4) - 3)), np.inf)
    return _fisher_interval(est, se, confidence)


@kernel(cache=True, nogil=True)
def _edgeworth_upper_one(n, s):
    """:func:`pairlens.core.rank._edgeworth_upper` compiled (AS 89, Best & Roberts 1975)."""
    n3 = n * (n * n - 1) / 3.0
    if s <= 0:
        return 1.0
    if s > n3:
        return 0.0
    c1, c2, c3, c4, c5, c6 = 0.2274, 0.2531, 0.1745, 0.0758, 0.1033, 0.3932
    c7, c8, c9, c10, c11, c12 = 0.0879, 0.0151, 0.0072, 0.0831, 0.0131, 4.6e-4
    b = 1.0 / n
    x = (6.0 * (s - 1.0) * b / (n * n - 1.0) - 1.0) * math.sqrt(n - 1.0)
    y = x * x
    u = x * b * (c1 + b * (c2 + c3 * b) + y * (-c4 + b * (c5 + c6 * b)
                 - y * b * (c7 + c8 * b - y * (c9 - c10 * b + y * b * (c11 - c12 * y)))))
    p = u / math.exp(y / 2.0) + 0.5 * math.erfc(x / math.sqrt(2.0))
    return min(1.0, max(0.0, p))


@kernel(cache=True, nogil=True)
def _spearman_edgeworth_kernel(n, s, out):
    # each pair's tail on its observed side only (the array form evaluated both and chose)
    half = n * n * n - n
    for k in range(s.shape[0]):
        v = s[k]
        if 6 * v > half:
            tail = _edgeworth_upper_one(n, float(v - 1))
        else:
            tail = 1.0 - _edgeworth_upper_one(n, float(v + 2))
        out[k] = min(1.0, 2.0 * tail)


def _spearman_edgeworth(n: int, s: np.ndarray) -> np.ndarray:
    """:func:`pairlens.core.rank.spearman_edgeworth_pvalue` over an array of integer s."""
    s = np.ascontiguousarray(s, dtype=np.int64)
    out = np.empty(s.shape[0])
    _spearman_edgeworth_kernel(int(n), s, out)
    return out


@lru_cache(maxsize=16)
def _spearman_exact_table(n: int) -> tuple[np.ndarray, np.ndarray]:
    s_values, _ = rank.spearman_null_counts(n)
    return s_values, np.array([rank.spearman_exact_pvalue(n, int(s)) for s in s_values])


def _log_multiplicity(col: np.ndarray) -> tuple[float, np.ndarray, int]:
    """sum log(t!) over tie groups, dense codes by row and the number of levels of one column."""
    values, dense, counts = np.unique(col, return_inverse=True, return_counts=True)
    return float(special.gammaln(counts[counts > 1] + 1.0).sum()), dense.reshape(-1), values.size


def _floor_note(floor: float, n: int) -> str:
    inverse = 1.0 / floor
    shown = f"1/{round(inverse)}" if abs(inverse - round(inverse)) < 1e-6 * inverse else f"{floor:.3g}"
    return f"p-value raised to {shown}, the smallest the permutation law of these {n} rows allows"


def _join(a: str, b: str) -> str:
    return "; ".join(filter(None, [a, b]))


@dataclass
class MeasureArrays:
    """One measure's results for every pair, as arrays aligned with :attr:`WidePairs.i`."""

    estimate: np.ndarray
    p_value: np.ndarray
    ci_low: np.ndarray
    ci_high: np.ndarray
    n: np.ndarray
    method: np.ndarray          # codes into ``methods``
    note: np.ndarray            # codes into ``notes``
    fallback: np.ndarray        # True: the per-pair kernel must compute this pair
    batched: np.ndarray         # True: the p-value came from the per-pair kernel batched here (split law)
    methods: list[str] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)

    @classmethod
    def empty(cls, size: int) -> "MeasureArrays":
        nan = np.full(size, np.nan)
        return cls(nan.copy(), nan.copy(), nan.copy(), nan.copy(), np.zeros(size, np.int64),
                   np.zeros(size, np.int16), np.zeros(size, np.int32), np.zeros(size, bool), np.zeros(size, bool))


@dataclass
class WidePairs:
    """Every pair i < j of the columns, and each measure's arrays."""

    i: np.ndarray
    j: np.ndarray
    measures: dict
    counts: dict = field(default_factory=dict)


class _Columns:
    """What the products need of each column, computed once."""

    def __init__(self, data: np.ndarray) -> None:
        n, p = data.shape
        self.n = n
        self.present = np.isfinite(data)
        self.complete = self.present.all(axis=0)
        clean = np.where(self.present, data, 0.0)
        counts = self.present.sum(axis=0)
        safe = np.maximum(counts, 1)
        with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
            means = clean.sum(axis=0) / safe
            centred = np.where(self.present, clean - means, 0.0)
            centred = np.where(self.present, centred - centred.sum(axis=0) / safe, 0.0)
            peak = np.abs(centred).max(axis=0, initial=0.0)
            self.scaled = centred / np.where(peak > 0, peak, 1.0)
        hi = np.where(self.present, data, -np.inf).max(axis=0, initial=-np.inf)
        lo = np.where(self.present, data, np.inf).min(axis=0, initial=np.inf)
        self.constant = ~(hi > lo)
        self.usable = ~self.constant & (peak > 0) & np.isfinite(peak)
        a2 = (self.scaled ** 2).sum(axis=0)
        self.a2 = a2
        self.a3 = (self.scaled ** 3).sum(axis=0)
        self.a4 = (self.scaled ** 4).sum(axis=0)
        with np.errstate(invalid="ignore", divide="ignore"):
            self.unit = np.where(self.usable, self.scaled / np.sqrt(np.where(a2 > 0, a2, 1.0)), 0.0)
            # the split rule's largest single share of the sum of squares (data scaled to max |v| = 1)
            self.share = 1.0 / a2
        self.data = data
        self.counts = self.present.sum(axis=0).astype(np.int64)
        self._by_column = None
        self._orders = None
        self._score_layout = None   # (values, presence, order by value), one column a row: _spearman_partial

    def orders(self) -> np.ndarray:
        """Each column's present rows in ascending value (column-wise), computed on first use."""
        if self._orders is None:
            keyed = np.where(self.present, self.scaled, np.inf)
            self._orders = np.asfortranarray(np.argsort(keyed, axis=0, kind="stable").astype(np.int64))
        return self._orders

    def by_column(self) -> np.ndarray:
        """The data transposed and contiguous, one column a row (a strided column costs 2x in the kernels)."""
        if self._by_column is None:
            self._by_column = np.ascontiguousarray(self.data.T)
        return self._by_column


def _pearson_exact(unscaled_x, unscaled_y, n, want_p, want_floor):
    """Exact relabelling p-values (n <= 7) and the enumerated floor (n <= 8) of a block of pairs,
    in one pass over the relabellings.

    The floor needs the largest :math:`|S_\\pi|` first: by the rearrangement inequality the
    largest and smallest :math:`S_\\pi` pair the sorted columns in the same and in opposite
    order, two products instead of a pass over all n! relabellings.
    """
    from .testing import all_pairings

    pairings = linear._all_relabellings(n) if n <= config.PEARSON_EXACT_MAX_N else all_pairings(n)
    observed = np.abs(unscaled_x.T @ unscaled_y)
    hits = np.zeros(observed.shape, np.int32) if want_p else None
    count = np.zeros(observed.shape, np.int32) if want_floor else None
    threshold = observed * (1.0 - 1e-12)
    if want_floor:
        sx, sy = np.sort(unscaled_x, axis=0), np.sort(unscaled_y, axis=0)
        top = np.maximum(np.abs(sx.T @ sy), np.abs(sx.T @ sy[::-1]))
        limit = top - 1e-9 * np.maximum(1.0, top)
    for perm in pairings:
        s = np.abs(unscaled_x.T @ unscaled_y[perm])
        if want_p:
            hits += s >= threshold
        if want_floor:
            count += s >= limit
    p = hits / len(pairings) if want_p else None
    floor = count / len(pairings) if want_floor else None
    return p, floor


def _apply_floor(arr: MeasureArrays, sel: np.ndarray, floor: np.ndarray, n: np.ndarray, labels: _Labels) -> None:
    """p raised to the permutation floor where below it, with the per-pair path's note."""
    p = arr.p_value[sel]
    low = (p == p) & (p < floor)
    if not low.any():
        return
    idx = np.flatnonzero(sel)[low]
    arr.p_value[idx] = floor[low]
    old_notes = arr.note[idx]
    for f, nn, old in set(zip(floor[low].tolist(), n[low].tolist(), old_notes.tolist())):
        code = labels.code(_join(labels.items[old], _floor_note(f, nn)))
        hit = (floor[low] == f) & (n[low] == nn) & (old_notes == old)
        arr.note[idx[hit]] = code


def _permutation_floor(cols, xi, yj, n, logm, dense, levels, p):
    """K/n! of :func:`pairlens.core.testing.permutation_floor` for pairs of complete columns (8 < n <= 1000).

    Without ties on a side K = 1 (or the other side's multiplicities alone); the
    joint multiplicities are counted in compiled code, and only for pairs whose
    p-value lies below the largest floor their margins allow.
    """
    lg = special.gammaln(n + 1.0)
    lx, ly = logm[xi], logm[yj]
    upper = np.exp(lx + ly - lg)
    floor = upper.copy()
    both = (lx > 0) & (ly > 0) & (p == p) & (p < upper)
    if both.any():
        joint = _joint_log_mult(dense, int(levels), xi[both].astype(np.int64), yj[both].astype(np.int64))
        floor[both] = np.exp(lx[both] - joint + ly[both] - lg)
    return floor


@kernel(cache=True, nogil=True)
def _masked_extremes(values, orders, counts, present, pi, pj):
    """Largest and smallest value of column pi[k] over the rows where column pj[k] is present.

    Walks the column's ascending order from each end until a row the other column has: O(1)
    per pair unless most of the extreme rows are missing in the partner.
    """
    m = pi.shape[0]
    lo = np.empty(m)
    hi = np.empty(m)
    for k in range(m):
        i = pi[k]
        j = pj[k]
        lo[k] = np.nan
        hi[k] = np.nan
        for t in range(counts[i]):
            row = orders[t, i]
            if present[row, j]:
                lo[k] = values[row, i]
                break
        for t in range(counts[i] - 1, -1, -1):
            row = orders[t, i]
            if present[row, j]:
                hi[k] = values[row, i]
                break
    return lo, hi


def _pearson_masked_moments(cols, rows_i, cols_j, xi, yj, sel, n, out, labels_m, threads):
    """The default (moment) p-value of pairs touching an incomplete column.

    Each side's power sums over the pair's rows are masked products,
    :math:`(V^{\\circ k})^T M`, turned into central sums about the pair's own
    mean; the split rule's largest share comes from each side's extreme values on
    the pair's rows (:func:`_masked_extremes`). Pairs the split rule or n <= 7
    sends elsewhere run the per-pair kernel on their rows, here.
    """
    v = cols.scaled
    mask = cols.present.astype(float)
    vi, vj, mi, mj = v[:, rows_i], v[:, cols_j], mask[:, rows_i], mask[:, cols_j]
    px = [((vi ** k).T @ mj).ravel()[sel] for k in (1, 2, 3, 4)]
    py = [(mi.T @ (vj ** k)).ravel()[sel] for k in (1, 2, 3, 4)]
    cross = (vi.T @ vj).ravel()[sel]
    nn = n[sel].astype(float)
    mx, a2, a3, a4 = linear._central_sums(*px, nn)
    my, b2, b3, b4 = linear._central_sums(*py, nn)
    s = np.abs(cross - nn * mx * my)
    orders = cols.orders()
    lo_x, hi_x = _masked_extremes(v, orders, cols.counts, cols.present, xi[sel].astype(np.int64),
                                  yj[sel].astype(np.int64))
    lo_y, hi_y = _masked_extremes(v, orders, cols.counts, cols.present, yj[sel].astype(np.int64),
                                  xi[sel].astype(np.int64))
    with np.errstate(divide="ignore", invalid="ignore"):
        share = np.maximum(np.maximum((hi_x - mx) ** 2, (lo_x - mx) ** 2) / a2,
                           np.maximum((hi_y - my) ** 2, (lo_y - my) ** 2) / b2)
    n_sel = n[sel]
    whole = (n_sel > config.PEARSON_SPLIT_MAX_N) & (share <= config.PEARSON_SPLIT_SHARE)
    idx = np.flatnonzero(sel)
    if whole.any():
        e2, e3, e4 = linear.permutation_moments(a2[whole], a3[whole], a4[whole], b2[whole], b3[whole], b4[whole],
                                                nn[whole])
        out.p_value[idx[whole]] = np.clip(linear._two_tails(s[whole], e2, e3, e4), 0.0, 1.0)
    rest = idx[~whole]
    if rest.size:
        # split law or exact enumeration: the per-pair kernel on the pair's own rows
        data = cols.data
        for k in rest.tolist():
            both = cols.present[:, xi[k]] & cols.present[:, yj[k]]
            out.p_value[k] = linear.moment_pvalue(data[both, xi[k]], data[both, yj[k]])
        out.batched[rest] = True
        exact = rest[n[rest] <= config.PEARSON_EXACT_MAX_N]
        out.method[exact] = labels_m.code(linear._METHOD_LABELS["exact"])


def _pearson_block(cols, rows_i, cols_j, out, test, confidence, labels_m, labels_n, counts, threads=1,
                   intervals=True):
    """Fill ``out`` (the pairs of columns rows_i x cols_j, flattened) for Pearson."""
    n_rows = cols.n
    xi, yj = np.meshgrid(rows_i, cols_j, indexing="ij")
    xi, yj = xi.ravel(), yj.ravel()
    pairs = xi.size
    complete = cols.complete[xi] & cols.complete[yj]
    if complete.all():
        n = np.full(pairs, n_rows, np.int64)
        r = (cols.unit[:, rows_i].T @ cols.unit[:, cols_j]).ravel()
    else:
        mask = cols.present.astype(float)
        z = cols.unit
        ni = np.rint(mask[:, rows_i].T @ mask[:, cols_j])
        sums = z[:, rows_i].T @ mask[:, cols_j]
        sums_t = (mask[:, rows_i].T @ z[:, cols_j])
        squares = (z[:, rows_i] ** 2).T @ mask[:, cols_j]
        squares_t = mask[:, rows_i].T @ (z[:, cols_j] ** 2)
        cross = z[:, rows_i].T @ z[:, cols_j]
        nf = np.maximum(ni, 1.0)
        var_i = squares - sums * sums / nf
        var_j = squares_t - sums_t * sums_t / nf
        with np.errstate(invalid="ignore", divide="ignore"):
            r_masked = (cross - sums * sums_t / nf) / np.sqrt(var_i * var_j)
        fragile = ((var_i <= 1e-8 * squares) | (var_j <= 1e-8 * squares_t)).ravel()
        r = np.where(complete, (cols.unit[:, rows_i].T @ cols.unit[:, cols_j]).ravel(), r_masked.ravel())
        n = ni.ravel().astype(np.int64)
        # nearly constant on the pair's rows, or constant there: the per-pair kernel decides
        out.fallback[:] = ~complete & fragile
    r = np.clip(r, -1.0, 1.0)
    method_label = linear._METHOD_LABELS["t" if test == "t" else "moments"]
    floor_grid = None
    # degenerate pairs: the per-pair path's notes
    few = n < config.MIN_ROWS
    cx, cy = cols.constant[xi], cols.constant[yj]
    # an incomplete column can be constant on a pair's rows only: those pairs are fragile (fallback)
    note = np.zeros(pairs, np.int32)
    note[cx & ~cy] = labels_n.code("constant column: x")
    note[cy & ~cx] = labels_n.code("constant column: y")
    note[cx & cy] = labels_n.code("constant column: x and y")
    unusable = (~cols.usable[xi] | ~cols.usable[yj]) & ~(cx | cy)
    out.fallback[unusable & ~few] = True
    # a side constant over its present values is constant on the pair's rows, but the other side may be
    # too: the per-pair kernel words the note
    out.fallback[(cx | cy) & ~complete & ~few] = True
    for k in np.unique(n[few]):
        note[few & (n == k)] = labels_n.code(f"fewer than {config.MIN_ROWS} rows with both values present ({k})")
    degenerate = few | cx | cy | unusable
    ok = ~degenerate & ~out.fallback & (xi < yj)   # the block's rectangle holds pairs j <= i too: not computed
    out.n[:] = n
    out.note[:] = note
    out.method[:] = labels_m.code(method_label)
    out.method[few] = labels_m.code("")
    out.estimate[:] = np.where(ok, r, np.nan)
    if intervals:
        out.ci_low[:], out.ci_high[:] = fisher_intervals("pearson", out.estimate, n, confidence)
    three = ok & (n == 3)
    out.note[three] = labels_n.code("interval is the whole range: Fisher z needs more than 3 rows")
    if test == "t":
        out.p_value[:] = np.where(ok, linear.correlation_t_pvalue(r, n, "auto"), np.nan)
    else:
        partial = ok & ~complete
        if partial.any():
            _pearson_masked_moments(cols, rows_i, cols_j, xi, yj, partial, n, out, labels_m, threads)
        computed = ok
        ok = ok & complete
        if n_rows <= config.PEARSON_EXACT_MAX_N:
            if ok.any():
                ux = cols.data[:, rows_i] - cols.data[:, rows_i].mean(axis=0)
                uy = cols.data[:, cols_j] - cols.data[:, cols_j].mean(axis=0)
                p, floor = _pearson_exact(ux, uy, n_rows, True, True)
                out.p_value[ok] = p.ravel()[ok]
                floor_grid = floor.ravel()
                out.method[ok] = labels_m.code(linear._METHOD_LABELS["exact"])
        else:
            share = np.maximum(cols.share[xi], cols.share[yj])
            split = ok & ((n_rows <= config.PEARSON_SPLIT_MAX_N) | (share > config.PEARSON_SPLIT_SHARE))
            whole = ok & ~split
            if whole.any():
                a = (cols.a2[xi[whole]], cols.a3[xi[whole]], cols.a4[xi[whole]])
                b = (cols.a2[yj[whole]], cols.a3[yj[whole]], cols.a4[yj[whole]])
                s = np.abs(r[whole]) * np.sqrt(a[0] * b[0])
                e2, e3, e4 = linear.permutation_moments(*a, *b, n_rows)
                out.p_value[whole] = np.clip(linear._two_tails(s, e2, e3, e4), 0.0, 1.0)
            if split.any():
                # the per-pair kernel, batched: its law is split into n parts (O(n) curves a pair)
                idx = np.flatnonzero(split)
                chunk = max(1, -(-idx.size // (4 * threads)))
                parts = [idx[start:start + chunk] for start in range(0, idx.size, chunk)]

                by_column = cols.by_column()

                def run(part):
                    # one pair at a time: at thousands of rows each pair's n curves fill the caches already
                    for k in part:
                        out.p_value[k] = linear.moment_pvalue(by_column[xi[k]], by_column[yj[k]])

                if threads > 1 and len(parts) > 1:
                    # the curve kernels release the GIL: threads share the cores without copying the data
                    from concurrent.futures import ThreadPoolExecutor

                    with ThreadPoolExecutor(max_workers=threads) as pool:
                        list(pool.map(run, parts))
                else:
                    for part in parts:
                        run(part)
                out.batched[split] = True
        ok = computed
    out.p_value[~ok & ~out.fallback] = np.nan
    _floor_block(cols, xi, yj, out, ok & ~out.fallback, counts, "pearson", labels_n, floor_grid)


def _floor_block(cols, xi, yj, out, ok, counts, measure, labels, grid=None):
    """The registry's p-value floor (:func:`pairlens.core.registry.pvalue_floor`).

    Complete pairs get it here; a pair touching an incomplete column whose
    p-value lies below the largest floor its columns' ties could give is sent
    to the per-pair kernel (its ties on its own rows decide).
    """
    has_p = ok & (out.p_value == out.p_value)
    complete = cols.complete[xi] & cols.complete[yj]
    n_rows = cols.n
    partial = has_p & ~complete & (out.n <= config.PVALUE_FLOOR_MAX_N)
    if partial.any():
        nn = out.n[partial].astype(float)
        upper = np.exp(cols.logm[xi[partial]] + cols.logm[yj[partial]] - special.gammaln(nn + 1.0))
        low = out.p_value[partial] < upper
        out.fallback[np.flatnonzero(partial)[low]] = True
    sel = has_p & complete
    if not sel.any() or n_rows > config.PVALUE_FLOOR_MAX_N or n_rows < 2:
        return
    if grid is not None:
        floors = grid[sel]      # enumerated with the exact p-values of the block
    elif measure == "spearman" and n_rows <= config.PVALUE_FLOOR_ENUMERATE_MAX_N and not (
            cols.tied[xi[sel]] | cols.tied[yj[sel]]).any():
        # untied ranks: the largest |sum r_x r_y| is reached by the sorted pairing and its
        # reverse only (rearrangement inequality, strict for distinct values): 2 of n! pairings
        floors = np.full(int(sel.sum()), 2 / math.factorial(n_rows))
    elif n_rows <= config.PVALUE_FLOOR_ENUMERATE_MAX_N:
        src = cols.data if measure == "pearson" else cols.ranks
        uniq_i = np.unique(xi[sel])
        uniq_j = np.unique(yj[sel])
        ux = src[:, uniq_i] - src[:, uniq_i].mean(axis=0)
        uy = src[:, uniq_j] - src[:, uniq_j].mean(axis=0)
        _, floor = _pearson_exact(ux, uy, n_rows, False, True)
        floors = floor[np.searchsorted(uniq_i, xi[sel]), np.searchsorted(uniq_j, yj[sel])]
    else:
        floors = _permutation_floor(cols, xi[sel], yj[sel], n_rows, cols.logm, cols.dense, cols.levels,
                                    out.p_value[sel])
    _apply_floor(out, sel, floors, np.full(int(sel.sum()), n_rows), labels)


@kernel(cache=True, nogil=True)
def _pair_scores(values, present, order, count, own, other, rows, out):
    """Integer mid-rank scores 2 * midrank - (rows + 1) of column ``own`` on the rows where ``other``
    is present too, written at those rows of ``out`` (the column's ascending order walked once)."""
    placed = 0
    t = 0
    while t < count:
        row = order[own, t]
        if not present[other, row]:
            t += 1
            continue
        # a tie group: the next rows (of the pair) with the same value
        value = values[own, row]
        end = t
        size = 0
        u = t
        while u < count and values[own, order[own, u]] == value:
            if present[other, order[own, u]]:
                size += 1
            end = u
            u += 1
        # the group holds ranks placed + 1 .. placed + size: 2 * midrank = 2 * placed + size + 1
        score = 2.0 * placed + size - rows
        for w in range(t, end + 1):
            r = order[own, w]
            if present[other, r]:
                out[r] = score
        placed += size
        t = end + 1


@kernel(cache=True, nogil=True)
def _masked_score_sums(values, present, order, counts, pi, pj):
    """Spearman's integer score sums of each pair (pi[k], pj[k]) on the pair's own rows.

    ``values``, ``present``, ``order``: one column a row (the data, its presence, its present rows in
    ascending value). Returns (sum sx sy, sum sx^2, sum sy^2, rows); the scores are integers, so the
    sums are exact as long as n^3 stays below 2^53 (the caller's limit), as in the per-pair kernel.
    """
    m = pi.shape[0]
    n = values.shape[1]
    txy = np.empty(m)
    txx = np.empty(m)
    tyy = np.empty(m)
    rows = np.zeros(m, np.int64)
    sx = np.zeros(n)
    sy = np.zeros(n)
    for k in range(m):
        i = pi[k]
        j = pj[k]
        c = 0
        for t in range(counts[i]):
            if present[j, order[i, t]]:
                c += 1
        rows[k] = c
        _pair_scores(values, present, order, counts[i], i, j, c, sx)
        _pair_scores(values, present, order, counts[j], j, i, c, sy)
        a = 0.0
        b = 0.0
        d = 0.0
        for t in range(counts[i]):
            r = order[i, t]
            if present[j, r]:
                a += sx[r] * sy[r]
                b += sx[r] * sx[r]
                d += sy[r] * sy[r]
        txy[k] = a
        txx[k] = b
        tyy[k] = d
    return txy, txx, tyy, rows


def _spearman_block(cols, rows_i, cols_j, out, confidence, labels_m, labels_n, counts, intervals=True):
    n_rows = cols.n
    xi, yj = np.meshgrid(rows_i, cols_j, indexing="ij")
    xi, yj = xi.ravel(), yj.ravel()
    pairs = xi.size
    complete = cols.complete[xi] & cols.complete[yj]
    out.fallback[:] = ~complete     # ranks among each pair's own rows: the per-pair kernel
    n = np.full(pairs, n_rows, np.int64)
    cx, cy = cols.constant[xi], cols.constant[yj]
    note = np.zeros(pairs, np.int32)
    note[cx & ~cy] = labels_n.code("constant column: x")
    note[cy & ~cx] = labels_n.code("constant column: y")
    note[cx & cy] = labels_n.code("constant column: x and y")
    t_label = labels_m.code("t approximation, n-2 df")
    out.method[:] = t_label
    few = np.zeros(pairs, bool) if n_rows >= config.MIN_ROWS else np.ones(pairs, bool)
    if few.any():
        note[:] = labels_n.code(f"fewer than {config.MIN_ROWS} rows with both values present ({n_rows})")
        out.method[:] = labels_m.code("")
    ok = complete & ~cx & ~cy & ~few & (xi < yj)
    out.n[:] = np.where(complete, n, 0)
    out.note[:] = note
    partial, sums = _spearman_partial(cols, xi, yj, complete, cx, cy, out)
    if not (ok | partial).any():
        return
    txy = np.zeros(pairs)
    sxx = np.zeros(pairs)
    syy = np.zeros(pairs)
    if ok.any():
        txy[:] = (cols.scores[:, rows_i].T @ cols.scores[:, cols_j]).ravel()
        sxx[:], syy[:] = cols.score_sq[xi] / 4, cols.score_sq[yj] / 4
    tied = cols.tied[xi] | cols.tied[yj]
    if partial.any():
        txy[partial], sxx[partial], syy[partial] = sums[0], sums[1] / 4, sums[2] / 4
        n = np.where(partial, out.n, n)
        n3 = n[partial] ** 3 - n[partial]
        tied[partial] = (sums[1] != n3 / 3) | (sums[2] != n3 / 3)
        ok = ok | partial
    with np.errstate(invalid="ignore", divide="ignore"):
        rho = np.clip((txy / 4) / np.sqrt(sxx * syy), -1.0, 1.0)
    rho = np.where(ok, rho, np.nan)
    out.estimate[:] = rho
    p = np.full(pairs, np.nan)
    use_t = ok & ((n >= config.SPEARMAN_T_MIN_N) | (tied & (n > config.SPEARMAN_TIED_PERMUTATION_MAX_N)))
    p[use_t] = linear.correlation_t_pvalue(rho[use_t], n[use_t], "auto")
    untied = ok & ~use_t & ~tied
    for rows in np.unique(n[untied]).tolist():
        # each row count's own law (pairs of complete columns share n_rows; others have their own)
        at = untied & (n == rows)
        s = (rows ** 3 - rows) // 6 - np.rint(txy[at] / 2).astype(np.int64)
        if rows <= config.SPEARMAN_EXACT_MAX_N:
            s_values, table = _spearman_exact_table(rows)
            p[at] = table[np.searchsorted(s_values, s)]
            out.method[at] = labels_m.code("exact")
        else:
            p[at] = _spearman_edgeworth(rows, s)
            out.method[at] = labels_m.code("Edgeworth series (AS 89)")
    # tied and small: a permutation test on the pair's scores (exact or seeded), the per-pair kernel
    rows_needed = ok & ~use_t & tied
    out.fallback[rows_needed] = True
    out.p_value[:] = p
    if n_rows <= 3:
        out.note[ok] = labels_n.code("interval is the whole range: Fisher z needs more than 3 rows")
    if intervals:
        out.ci_low[:], out.ci_high[:] = fisher_intervals("spearman", rho, n, confidence)
    _floor_block(cols, xi, yj, out, ok & ~rows_needed, counts, "spearman", labels_n)


def _spearman_partial(cols, xi, yj, complete, cx, cy, out):
    """The pairs touching an incomplete column whose scores on their own rows are computed here
    (:func:`_masked_score_sums`), as a mask, and their score sums (sum sx sy, sum sx^2, sum sy^2);
    their row counts go to ``out.n`` and they leave the fallback.

    The per-pair kernel keeps the rest: a side constant over its present values (it words the
    note), at most ``SPEARMAN_TIED_PERMUTATION_MAX_N`` rows (exact and permutation laws), a side
    constant on the pair's rows, and tables beyond exact integer sums."""
    cand = ~complete & ~cx & ~cy & (xi < yj)
    if not cand.any() or cols.n > _SPEARMAN_EXACT_MAX_N:
        return np.zeros(xi.size, bool), None
    if cols._score_layout is None:
        by_value = np.where(cols.present, cols.data, np.inf)
        order = np.ascontiguousarray(np.argsort(by_value, axis=0, kind="stable").T.astype(np.int64))
        cols._score_layout = (cols.by_column(), np.ascontiguousarray(cols.present.T), order)
    values, present, order = cols._score_layout
    idx = np.flatnonzero(cand)
    txy, txx, tyy, rows = _masked_score_sums(values, present, order, cols.counts, xi[idx].astype(np.int64),
                                             yj[idx].astype(np.int64))
    usable = (rows > config.SPEARMAN_TIED_PERMUTATION_MAX_N) & (txx > 0) & (tyy > 0)
    partial = np.zeros(xi.size, bool)
    partial[idx[usable]] = True
    out.n[idx] = rows
    out.fallback[partial] = False
    return partial, (txy[usable], txx[usable], tyy[usable])


def _prepare_ranks(cols: _Columns) -> None:
    """Integer rank scores 2 * midrank - (n + 1) of the complete columns, tie flags, tie multiplicities."""
    n, p = cols.data.shape
    scores = np.zeros((n, p))
    for k in np.flatnonzero(cols.complete):
        scores[:, k] = 2.0 * rank.midranks(cols.data[:, k]) - (n + 1)
    cols.scores = scores
    cols.ranks = scores / 2.0
    cols.score_sq = (scores * scores).sum(axis=0)
    cols.tied = cols.score_sq != float((n ** 3 - n) // 3)


def _prepare_ties(cols: _Columns) -> None:
    """Each column's sum log(t!) over tie groups (present values) and dense codes of the complete ones."""
    n, p = cols.data.shape
    logm = np.zeros(p)
    dense = np.zeros((n, p), np.int64)
    levels = 1
    for k in range(p):
        present = cols.present[:, k]
        logm[k], codes, lv = _log_multiplicity(cols.data[present, k])
        if cols.complete[k]:
            dense[:, k] = codes
            levels = max(levels, lv)
    cols.logm, cols.dense, cols.levels = logm, np.asfortranarray(dense), levels


_FIELDS = ("estimate", "p_value", "ci_low", "ci_high", "n", "method", "note", "fallback", "batched")
# Bins of the first pass over p-values: the top 24 bits of the double (sign, exponent, 12 bits of mantissa)
_KEY_SHIFT = 40
KEY_BINS = (0x3FF0000000000000 >> _KEY_SHIFT) + 1          # 1.0 is the largest p-value
_GATHER_MAX = 1 << 22           # values gathered and sorted at once when the candidate bins hold this few
_SUB_BINS = 1 << 22             # bins of a refinement pass


class WideCancelled(RuntimeError):
    """The caller's ``cancel()`` returned True between two blocks."""


def _n_pairs(data) -> int:
    p = np.asarray(data).shape[1]
    return p * (p - 1) // 2


def _counts(arr: MeasureArrays, total: int) -> dict:
    return {"pairs": int(total), "per_pair_kernel": int(arr.fallback.sum()),
            "split_law_batched": int(arr.batched.sum()),
            "exact_enumeration": int(sum((arr.method == k).sum() for k, label in enumerate(arr.methods)
                                         if label.startswith("exact")))}


def _prepare(data, measures, pearson_test):
    data = np.asarray(data, dtype=float)
    if data.ndim != 2:
        raise ValueError("data must be a 2-D (rows, columns) array")
    unknown = [m for m in measures if m not in WIDE_MEASURES]
    if unknown:
        raise ValueError(f"the matrix path computes {', '.join(WIDE_MEASURES)}; not {', '.join(unknown)}")
    if pearson_test not in ("moments", "t"):
        raise ValueError(f"the matrix path's Pearson test is moments or t, not {pearson_test!r}")
    n_rows, p = data.shape
    cols = _Columns(data)
    if "spearman" in measures:
        _prepare_ranks(cols)
        if n_rows > _SPEARMAN_EXACT_MAX_N:
            cols.complete = np.zeros(p, bool)   # integer products would no longer be exact: per pair
    _prepare_ties(cols)
    return cols


def _run_blocks(data, measures, pearson_test, confidence, block_elements, threads, labels, counts, intervals,
                progress, cancel):
    """Blocks of whole rows of the upper triangle (columns row..stop-1 against every later column):
    yields (start, stop, i, j, {measure: MeasureArrays of the block's pairs})."""
    cols = _prepare(data, measures, pearson_test)
    p = cols.data.shape[1]
    total = p * (p - 1) // 2
    pool = None
    if threads > 1 and len(measures) > 1 and total > block_elements:
        from concurrent.futures import ThreadPoolExecutor

        pool = ThreadPoolExecutor(max_workers=len(measures))
        # the measures' blocks are in memory at once: together no larger than one block alone
        block_elements = max(1, block_elements // len(measures))
    try:
        yield from _block_loop(cols, measures, pearson_test, confidence, block_elements, threads, labels, counts,
                               intervals, progress, cancel, pool)
    finally:
        if pool is not None:
            pool.shutdown()


def _block_loop(cols, measures, pearson_test, confidence, block_elements, threads, labels, counts, intervals,
                progress, cancel, pool):
    p = cols.data.shape[1]
    total = p * (p - 1) // 2
    start = 0
    row = 0
    while row < p - 1:
        if cancel is not None and cancel():
            raise WideCancelled("cancelled between blocks")
        stop = row + 1
        size = p - 1 - row
        while stop < p - 1 and size + (p - 1 - stop) <= block_elements:
            size += p - 1 - stop
            stop += 1
        rows_i = np.arange(row, stop)
        cols_j = np.arange(row + 1, p)
        keep = (cols_j[None, :] > rows_i[:, None]).ravel()

        def one(m, rows_i=rows_i, cols_j=cols_j, keep=keep):
            block = MeasureArrays.empty(rows_i.size * cols_j.size)
            lm, ln = labels[m]
            if m == "pearson":
                _pearson_block(cols, rows_i, cols_j, block, pearson_test, confidence, lm, ln, counts, threads,
                               intervals)
            else:
                _spearman_block(cols, rows_i, cols_j, block, confidence, lm, ln, counts, intervals)
            return MeasureArrays(*(getattr(block, name)[keep] for name in _FIELDS))

        if pool is not None:
            # NumPy's and SciPy's elementwise loops and BLAS release the GIL: the measures share the cores
            futures = {m: pool.submit(one, m) for m in measures}
            out = {m: futures[m].result() for m in measures}
        else:
            out = {m: one(m) for m in measures}
        ii, jj = np.meshgrid(rows_i.astype(np.int32), cols_j.astype(np.int32), indexing="ij")
        yield start, start + size, ii.ravel()[keep], jj.ravel()[keep], out
        start += size
        row = stop
        if progress is not None:
            progress(start / max(total, 1))


def key_histogram(p: np.ndarray) -> np.ndarray:
    """Counts of non-negative p-values (no NaN) in the first-pass bins of :func:`head_adjusted`."""
    keys = (np.asarray(p, dtype=float) + 0.0).view(np.int64) >> _KEY_SHIFT    # + 0.0: -0.0 becomes 0.0
    return np.bincount(keys, minlength=KEY_BINS)


def _bin_bounds(lo_keys, hi_keys, ends, m):
    """Lower bound of m p / j over a bin's values and an upper bound of its last value's."""
    lo = lo_keys.view(np.float64)
    hi = np.minimum(hi_keys, 0x3FF0000000000000).view(np.float64)
    return lo * m / ends, hi * m / ends


def _bh_tail_min(m: int, k: int, chunks, histogram=None) -> float:
    """min over ranks j > k of m p_(j) / j, exactly (see :func:`head_adjusted`); values above 1 as 1."""
    if histogram is None:
        histogram = np.zeros(KEY_BINS, np.int64)
        for part in chunks():
            histogram += key_histogram(part)
    # candidates: bin ids at this shift, the count of values below each, and each bin's count
    shift = _KEY_SHIFT
    ids = np.flatnonzero(histogram)
    cnt = histogram[ids].astype(np.int64)
    before = np.cumsum(cnt) - cnt
    best = 1.0      # q-values are capped at 1: a tail value above 1 changes nothing
    while True:
        ends = before + cnt
        tail = ends > k
        ids, cnt, before, ends = ids[tail], cnt[tail], before[tail], ends[tail]
        lo_keys = (ids << shift).astype(np.int64)
        hi_keys = ((ids + 1) << shift).astype(np.int64)
        low, high = _bin_bounds(lo_keys, hi_keys, ends.astype(float), m)
        if shift == 0:
            # one value a bin: its last rank gives its smallest m p / j
            return float(min(best, low.min())) if low.size else best
        best = min(best, float(high.min())) if high.size else best
        keep = low <= best
        ids, cnt, before = ids[keep], cnt[keep], before[keep]
        if ids.size == 0:
            return best
        if cnt.sum() <= _GATHER_MAX:
            return min(best, _gather_min(m, k, chunks, ids, before, shift))
        bits = max(1, min(shift, int(math.log2(_SUB_BINS // ids.size)) if ids.size < _SUB_BINS else 1))
        new_shift = shift - bits
        sub = np.zeros(ids.size << bits, np.int64)
        first, last = int(ids[0]), int(ids[-1])
        for part in chunks():
            key = (np.asarray(part, dtype=float) + 0.0).view(np.int64)
            top = key >> shift
            near = (top >= first) & (top <= last)
            key, top = key[near], top[near]
            at = np.minimum(np.searchsorted(ids, top), ids.size - 1)
            hit = ids[at] == top
            code = (at[hit] << bits) + ((key[hit] >> new_shift) & ((1 << bits) - 1))
            sub += np.bincount(code, minlength=sub.size)
        sub = sub.reshape(ids.size, 1 << bits)
        inner = np.cumsum(sub, axis=1) - sub
        nonzero = sub > 0
        owner, slot = np.nonzero(nonzero)
        before = (before[owner] + inner[owner, slot]).astype(np.int64)
        cnt = sub[owner, slot]
        ids = (ids[owner] << bits) + slot
        shift = new_shift


def _gather_min(m, k, chunks, ids, before, shift) -> float:
    """The candidate bins' values gathered, sorted and ranked: min of m p / j over ranks j > k."""
    first, last = int(ids[0]), int(ids[-1])
    found = []
    for part in chunks():
        key = (np.asarray(part, dtype=float) + 0.0).view(np.int64)
        top = key >> shift
        near = (top >= first) & (top <= last)
        key, top = key[near], top[near]
        at = np.minimum(np.searchsorted(ids, top), ids.size - 1)
        found.append(key[ids[at] == top])
    keys = np.sort(np.concatenate(found)) if found else np.empty(0, np.int64)
    if keys.size == 0:
        return math.inf
    owner = np.searchsorted(ids, keys >> shift)
    first_of = np.searchsorted(keys >> shift, ids)          # where each bin's values start
    rank = before[owner] + (np.arange(keys.size) - first_of[owner]) + 1
    values = keys.view(np.float64)
    tail = rank > k
    if not tail.any():
        return math.inf
    return float((values[tail] * m / rank[tail]).min())


# --- public function -----------------------------------------------------------------

def pair_matrix(data: np.ndarray, *, measures=WIDE_MEASURES, pearson_test: str = "moments",
                confidence: float = 0.95, block_elements: int = 2_000_000, threads: int = 1,
                progress=None, cancel=None) -> WidePairs:
    """Pearson and Spearman for every pair of columns, by blocks of matrix products.

    Parameters
    ----------
    data : numpy.ndarray
        (n, p) float array; NaN (or inf) marks a missing value. Each pair uses
        the rows where both of its columns are present.
    measures : sequence of {"pearson", "spearman"}
        Measures to compute.
    pearson_test : {"moments", "t"}
        Pearson's p-value: the default permutation-moment law
        (:func:`pairlens.core.linear.moment_pvalue`) or the t-test with n-2 df.
    confidence : float
        Level of the Fisher z intervals.
    block_elements : int
        Pairs per block of products (bounds the working memory).
    threads : int
        Threads for the pairs batched through the per-pair kernel (split law).
    progress : callable, optional
        ``progress(fraction_of_pairs_done)`` after each block.
    cancel : callable, optional
        Polled before each block; True stops the run with :class:`WideCancelled`.

    Returns
    -------
    WidePairs
        ``i < j`` column indices in row-major upper-triangle order and, per
        measure, :class:`MeasureArrays` equal to the per-pair kernels'
        results (estimate, p-value with the registry's permutation floor,
        interval, rows, method and note), except where ``fallback`` is True:
        those pairs need the per-pair kernel. ``counts`` says how many pairs
        took each special path.

    Notes
    -----
    Pearson: each column is centred (two passes) and scaled to unit length,
    :math:`U`; then :math:`r = U^T U`. For the default p-value the permutation
    moments of :math:`S = \\sum x_i y_{\\pi(i)}` come from each column's central
    power sums :math:`A_2, A_3, A_4` (:func:`pairlens.core.linear.permutation_moments`),
    :math:`|S| = |r|\\sqrt{A_2 B_2}`, and one Pearson curve per pair; up to 7 rows
    every relabelling :math:`\\pi` is one more product :math:`X^T Y_\\pi`. Pairs that
    the split rule sends to the split law (up to 60 rows, or one point holding
    more than 10 % of a side's sum of squares) are batched through the per-pair
    kernel. With missing values, :math:`n_{ij} = (M^T M)_{ij}` and the
    pair-specific means enter as corrections :math:`S_{ij}S_{ji}/n_{ij}`, as in
    :func:`pairlens.core.linear.pearson_matrix`.

    Spearman: the integer scores :math:`a = 2R - (n+1)` (R the mid-ranks) give
    exact integer products :math:`T = A^T A` in float64 for :math:`n^3 < 2^{53}`,
    so :math:`\\rho = T / \\sqrt{T_{xx} T_{yy}}` carries the same bits as the
    per-pair kernel's exact sums; the p-value follows
    :func:`pairlens.core.rank.spearman_from_sums` (exact table, Edgeworth
    series or t), a tied sample below 30 rows going to the per-pair kernel.

    Both: p-values are raised to the smallest value the pair's permutation law
    allows (:func:`pairlens.core.registry.pvalue_floor`): all relabellings up to
    8 rows, :math:`K/n!` from the tie multiplicities up to 1,000 rows.

    References
    ----------
    Pearson, K. (1895). Proc. R. Soc. Lond. 58:240-242. doi:10.1098/rspl.1895.0041

    Pitman, E.J.G. (1937). Suppl. J. R. Stat. Soc. 4:225-232. doi:10.2307/2983647

    Spearman, C. (1904). Am. J. Psychol. 15:72-101. doi:10.2307/1412159

    Examples
    --------
    >>> rng = np.random.default_rng(8)
    >>> data = rng.normal(size=(40, 5))
    >>> wp = pair_matrix(data)
    >>> wp.i.size, bool(wp.measures["pearson"].fallback.any())
    (10, False)
    """
    result = None
    labels = {m: (_Labels(), _Labels()) for m in measures}
    counts: dict = {}
    for start, stop, _, _, block in _run_blocks(data, measures, pearson_test, confidence, block_elements, threads,
                                                labels, counts, True, progress, cancel):
        if result is None:
            total = _n_pairs(data)
            result = {m: MeasureArrays.empty(total) for m in measures}
        for m in measures:
            dest, src = result[m], block[m]
            for name in _FIELDS:
                getattr(dest, name)[start:stop] = getattr(src, name)
    p = np.asarray(data).shape[1]
    if result is None:
        result = {m: MeasureArrays.empty(0) for m in measures}
    total = p * (p - 1) // 2
    for m in measures:
        result[m].methods, result[m].notes = labels[m][0].items, labels[m][1].items
        counts[m] = _counts(result[m], total)
    iu, ju = np.triu_indices(p, k=1)
    return WidePairs(iu.astype(np.int32), ju.astype(np.int32), result, counts)


def pair_blocks(data: np.ndarray, *, measures=WIDE_MEASURES, pearson_test: str = "moments",
                confidence: float = 0.95, block_elements: int = 1_000_000, threads: int = 1,
                intervals: bool = True, cancel=None):
    """:func:`pair_matrix` one block of pairs at a time, for tables whose pairs do not fit in memory.

    Parameters
    ----------
    data, measures, pearson_test, confidence, block_elements, threads
        As in :func:`pair_matrix`.
    intervals : bool
        False leaves ``ci_low``/``ci_high`` NaN (fill the rows kept afterwards
        with :func:`fisher_intervals`): they are most of the elementwise work.
    cancel : callable, optional
        Polled before each block; when it returns True the iteration stops with
        :class:`WideCancelled`.

    Yields
    ------
    tuple
        ``(start, stop, i, j, arrays, labels)``: the pairs ``start:stop`` of the
        upper triangle in :func:`pair_matrix`'s order, their column indices, a
        :class:`MeasureArrays` per measure (``methods``/``notes`` hold the labels
        so far, shared by all blocks) and the number of pairs in all.

    Notes
    -----
    Peak memory is the table, its rank scores and one block (about 30 arrays of
    ``block_elements`` numbers), whatever the number of pairs.

    Examples
    --------
    >>> rng = np.random.default_rng(3)
    >>> parts = list(pair_blocks(rng.normal(size=(20, 30)), block_elements=100))
    >>> sum(b[1] - b[0] for b in parts), parts[-1][5]
    (435, 435)
    """
    labels = {m: (_Labels(), _Labels()) for m in measures}
    counts: dict = {}
    total = _n_pairs(data)
    for start, stop, i, j, block in _run_blocks(data, measures, pearson_test, confidence, block_elements, threads,
                                                labels, counts, intervals, None, cancel):
        for m in measures:
            block[m].methods, block[m].notes = labels[m][0].items, labels[m][1].items
        yield start, stop, i, j, block, total


def head_adjusted(head: np.ndarray, m: int, chunks, method: str = "bh", histogram=None) -> np.ndarray:
    r"""Adjusted p-values of the smallest p-values of a column too long to hold, exactly as
    :func:`pairlens.core.testing.adjust_pvalues` would give them on the whole column.

    Parameters
    ----------
    head : numpy.ndarray
        The K smallest p-values of the column, ascending (no NaN).
    m : int
        The number of non-missing p-values in the whole column.
    chunks : callable
        ``chunks()`` yields the column's m p-values (float64, no NaN, any order)
        as arrays; called once per refinement pass (BH only).
    method : {"bh", "holm", "none"}
    histogram : numpy.ndarray, optional
        :func:`key_histogram` summed over the chunks, if already counted (saves a pass).

    Returns
    -------
    numpy.ndarray
        The adjusted p-values of ``head``, in its order.

    Notes
    -----
    Holm's :math:`\max_{j \le i} (m-j+1) p_{(j)}` needs the head only. BH's
    :math:`q_{(i)} = \min(1, \min_{j \ge i} m p_{(j)}/j)` needs, beyond the head,
    :math:`T = \min_{j > K} m p_{(j)} / j` over the whole column. Non-negative
    doubles order as their bit patterns, so the top bits of the pattern bin the
    p-values and the bins' counts give every bin's ranks exactly. A bin
    :math:`[l, h)` whose ranks end at :math:`C` holds values of
    :math:`m p / j` at least :math:`m l / C`, and its last value is below
    :math:`m h / C`; bins whose lower bound exceeds the smallest upper bound
    cannot hold :math:`T`. The other bins are split on the next bits (a pass
    over the chunks each) until few values are left, which are then gathered,
    sorted and ranked: the same products and divisions as the whole-column
    computation, so the same doubles.

    References
    ----------
    Benjamini, Y. & Hochberg, Y. (1995). J. R. Stat. Soc. B 57:289-300.
    doi:10.1111/j.2517-6161.1995.tb02031.x

    Examples
    --------
    >>> from pairlens.core.testing import adjust_pvalues
    >>> p = np.random.default_rng(5).uniform(size=1000) ** 4
    >>> head = np.sort(p)[:10]
    >>> q = head_adjusted(head, p.size, lambda: iter([p]))
    >>> bool(np.allclose(q, np.sort(adjust_pvalues(p))[:10], rtol=0, atol=0))
    True
    """
    head = np.asarray(head, dtype=float)
    k = head.size
    if method == "none":
        return head.copy()
    j = np.arange(1, k + 1)
    if method == "holm":
        return np.minimum(np.maximum.accumulate(head * (m - np.arange(k))), 1.0)
    if method != "bh":
        raise ValueError(f"unknown adjustment {method!r}; choose from bh, holm, none")
    scaled = head * m / j
    tail = _bh_tail_min(m, k, chunks, histogram) if m > k else np.inf
    q = np.minimum.accumulate(np.append(scaled, tail)[::-1])[::-1][:-1]
    return np.minimum(q, 1.0)
