"""All pairs of columns from one sort per column.

The engine sorts every column once (stable, missing values last). For a pair
under pairwise-complete missingness the stable order of x among the pair's
complete rows is that global order with the other column's missing rows left
out, so every pair gets its orders in O(n) instead of new sorts; from them come
mid-ranks (Spearman), the (x, y) order for Knight's count (Kendall), the
orders of the O(n log n) distance covariance and the x order of Chatterjee's
xi. The kernels only prepare orders and exact sums; estimates and p-values are
finished by the same functions the per-pair measures use, so both paths give
the same numbers (tests/core/test_allpairs.py).

Memory: the prepared columns hold O(n p) numbers; each pair needs O(n) more.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from .jit import kernel
from .rank import exact_score_sums

__all__ = ["PreparedColumns", "prepare_columns", "PairView", "pair_view", "spearman_sums",
           "kendall_order", "kendall_counts_view", "distance_orders", "xi_order", "rank_counts", "median_sorted",
           "pair_work", "PresortedPair", "warm_kernels"]


# --- compiled kernels ---------------------------------------------------------------

@kernel(cache=True, nogil=True, python_max_n=64)
def _pair_view(xcol, ycol, xorder, xcount, yorder, ycount, xpresent, ypresent):
    """Complete rows of a pair in row order and both stable orders, by filtering."""
    n_rows = xcol.shape[0]
    if xcount == n_rows and ycount == n_rows:
        # nothing missing: the columns' own orders, with no scattered reads (at 10^6 rows the
        # filter below is memory-bound, a cache miss per row)
        return xcol.copy(), ycol.copy(), xorder[:n_rows].copy(), yorder[:n_rows].copy()
    position = np.empty(n_rows, np.int64)
    m = 0
    for row in range(n_rows):
        if xpresent[row] and ypresent[row]:
            position[row] = m
            m += 1
    xp = np.empty(m)
    yp = np.empty(m)
    for row in range(n_rows):
        if xpresent[row] and ypresent[row]:
            k = position[row]
            xp[k] = xcol[row]
            yp[k] = ycol[row]
    ox = np.empty(m, np.int64)
    k = 0
    for t in range(xcount):
        row = xorder[t]
        if ypresent[row]:
            ox[k] = position[row]
            k += 1
    oy = np.empty(m, np.int64)
    k = 0
    for t in range(ycount):
        row = yorder[t]
        if xpresent[row]:
            oy[k] = position[row]
            k += 1
    return xp, yp, ox, oy


@kernel(cache=True, nogil=True, python_max_n=64)
def _centred_midranks(values, order):
    """Mid-ranks minus (n + 1)/2, by row, from a stable ascending order."""
    n = values.shape[0]
    out = np.empty(n)
    centre = (n + 1) / 2.0
    start = 0
    for i in range(1, n + 1):
        if i == n or values[order[i]] != values[order[start]]:
            rank = (start + 1 + i) / 2.0 - centre
            for k in range(start, i):
                out[order[k]] = rank
            start = i
    return out


@kernel(cache=True, nogil=True, python_max_n=64)
def _spearman_sums(xp, ox, yp, oy):
    """Exact integer sums of the scores 2 r (r the centred mid-ranks) as high and low parts.

    Integers at any n, so the sums do not depend on the order of summation and
    no pair ever needs its columns sorted again (float sums of n^3 size stop
    being exact near n = 2e5).
    """
    rx = _centred_midranks(xp, ox)
    ry = _centred_midranks(yp, oy)
    n = rx.shape[0]
    ax = np.empty(n, np.int64)
    ay = np.empty(n, np.int64)
    for k in range(n):
        ax[k] = np.int64(2.0 * rx[k])
        ay[k] = np.int64(2.0 * ry[k])
    return exact_score_sums(ax, ay)


def _rank_sums_as_floats(hi: np.ndarray, lo: np.ndarray) -> tuple[float, float, float]:
    """sum rx ry, sum rx^2, sum ry^2: each exact integer sum of scores / 4, rounded once."""
    return tuple((int(h) * 2**32 + int(l)) / 4 for h, l in zip(hi, lo))


@kernel(cache=True, nogil=True, python_max_n=64)
def _lex_order(xp, ox, oy):
    """Rows by x, and by y within tied x: each row of the y order dropped into its x run."""
    n = xp.shape[0]
    run_start = np.empty(n, np.int64)
    fill = np.empty(n, np.int64)
    start = 0
    for i in range(1, n + 1):
        if i == n or xp[ox[i]] != xp[ox[start]]:
            for k in range(start, i):
                run_start[ox[k]] = start
            fill[start] = start
            start = i
    seq = np.empty(n, np.int64)
    for t in range(n):
        row = oy[t]
        s = run_start[row]
        seq[fill[s]] = row
        fill[s] += 1
    return seq


@kernel(cache=True, nogil=True, python_max_n=64)
def _run_sums(values, order):
    """Tied pairs, sum t(t-1)(t-2), sum t(t-1)(2t+5) over runs, and the dense rank by row."""
    n = order.shape[0]
    dense = np.empty(n, np.int64)
    pairs = 0
    t3 = 0.0
    t5 = 0.0
    level = 0
    start = 0
    for i in range(1, n + 1):
        if i == n or values[order[i]] != values[order[start]]:
            t = i - start
            if t > 1:
                pairs += t * (t - 1) // 2
                tf = float(t)
                t3 += tf * (tf - 1.0) * (tf - 2.0)
                t5 += tf * (tf - 1.0) * (2.0 * tf + 5.0)
            for k in range(start, i):
                dense[order[k]] = level
            level += 1
            start = i
    return pairs, t3, t5, dense, level


@kernel(cache=True, nogil=True, python_max_n=64)
def _kendall_counts(xp, ox, yp, oy):
    """Knight's counts from the two orders: rows in (x, y) order, then the
    discordant pairs as inversions of the dense y ranks, counted with a
    Fenwick tree (O(n log n), no sort)."""
    n = ox.shape[0]
    tied_x, x_t3, x_t5, x_dense, _ = _run_sums(xp, ox)
    tied_y, y_t3, y_t5, y_dense, levels = _run_sums(yp, oy)
    seq = _lex_order(xp, ox, oy)
    tree = np.zeros(levels + 1, np.int32)
    discordant = 0
    tied_xy = 0
    run = 1
    for k in range(n):
        row = seq[k]
        rank = y_dense[row]
        if k > 0:
            prev = seq[k - 1]
            if x_dense[prev] == x_dense[row] and y_dense[prev] == rank:
                run += 1
            else:
                tied_xy += run * (run - 1) // 2
                run = 1
        # earlier rows with a y rank at most this one
        at_most = 0
        i = rank + 1
        while i > 0:
            at_most += tree[i]
            i -= i & (-i)
        discordant += k - at_most
        i = rank + 1
        while i <= levels:
            tree[i] += 1
            i += i & (-i)
    tied_xy += run * (run - 1) // 2
    return discordant, tied_x, tied_y, tied_xy, x_t3, x_t5, y_t3, y_t5


@kernel(cache=True, nogil=True, python_max_n=64)
def _distance_orders(xp, xc, ox, yp, yc, oy):
    """(argsort(xc), argsort(yc[argsort(xc)])), both stable, from the orders of x and y.

    Centring is monotone, so the x order stays sorted; two different x that
    round to the same centred value must then be ordered by row, as a stable
    sort of xc would order them. The y order groups equal centred y and lists
    each group in x-order position, which is what the stable sort of y in x
    order gives. ``merged`` is True when centring made two different values
    of x or of y equal (the ties of the centred columns are then not the data's).
    """
    n = xc.shape[0]
    order = ox.copy()
    merged = False
    start = 0
    for i in range(1, n + 1):
        if i == n or xc[order[i]] != xc[order[start]]:
            if i - start > 1 and xp[order[start]] != xp[order[i - 1]]:
                order[start:i] = np.sort(order[start:i])
                merged = True
            start = i
    group = np.empty(n, np.int64)
    fill = np.empty(n, np.int64)
    start = 0
    for i in range(1, n + 1):
        if i == n or yc[oy[i]] != yc[oy[start]]:
            if i - start > 1 and yp[oy[start]] != yp[oy[i - 1]]:
                merged = True
            for k in range(start, i):
                group[oy[k]] = start
            fill[start] = start
            start = i
    y_order = np.empty(n, np.int64)
    for k in range(n):
        g = group[order[k]]
        y_order[fill[g]] = k
        fill[g] += 1
    return order, y_order, merged


@kernel(cache=True, nogil=True, python_max_n=64)
def _kendall_ties(xp, ox, yp, oy):
    """Knight's counts without the discordant pairs (returned as -1): the tie sums of
    each side, and the pairs tied on both, counted per run of x with a tally of y ranks."""
    n = ox.shape[0]
    tied_x, x_t3, x_t5, x_dense, _ = _run_sums(xp, ox)
    tied_y, y_t3, y_t5, y_dense, levels = _run_sums(yp, oy)
    tied_xy = 0
    if tied_x > 0 and tied_y > 0:
        tally = np.zeros(levels, np.int64)
        start = 0
        for i in range(1, n + 1):
            if i == n or x_dense[ox[i]] != x_dense[ox[start]]:
                if i - start > 1:
                    for k in range(start, i):
                        level = y_dense[ox[k]]
                        tied_xy += tally[level]
                        tally[level] += 1
                    for k in range(start, i):
                        tally[y_dense[ox[k]]] = 0
                start = i
    return -1, tied_x, tied_y, tied_xy, x_t3, x_t5, y_t3, y_t5


@kernel(cache=True, nogil=True, python_max_n=64)
def _has_ties(values, order):
    for k in range(1, order.shape[0]):
        if values[order[k]] == values[order[k - 1]]:
            return True
    return False


@kernel(cache=True, nogil=True, python_max_n=64)
def _tie_log_factorials(values, order):
    """The sum of ln(c!) over the runs of c equal values along a sorted order (0.0 without ties)."""
    n = order.shape[0]
    total = 0.0
    start = 0
    for i in range(1, n + 1):
        if i == n or values[order[i]] != values[order[start]]:
            if i - start > 1:
                total += math.lgamma(i - start + 1.0)
            start = i
    return total


@kernel(cache=True, nogil=True, python_max_n=64)
def _order_ties_by_key(values, order, keys):
    """Within each run of tied values, rows by increasing key (by row among equal keys)."""
    n = order.shape[0]
    out = order.copy()
    start = 0
    for i in range(1, n + 1):
        if i == n or values[out[i]] != values[out[start]]:
            if i - start > 1:
                rows = np.sort(out[start:i])
                # a stable sort of the keys of the rows taken in row order
                pick = np.argsort(keys[rows], kind="mergesort")
                for k in range(i - start):
                    out[start + k] = rows[pick[k]]
            start = i
    return out


@kernel(cache=True, nogil=True, python_max_n=64)
def _rank_counts(values, order):
    """r_i = #{j: v_j <= v_i}, l_i = #{j: v_j >= v_i} by row, from a sorted order."""
    n = order.shape[0]
    r = np.empty(n, np.int64)
    l = np.empty(n, np.int64)
    start = 0
    for i in range(1, n + 1):
        if i == n or values[order[i]] != values[order[start]]:
            for k in range(start, i):
                r[order[k]] = i
                l[order[k]] = n - start
            start = i
    return r, l


@kernel(cache=True, nogil=True, python_max_n=64)
def _pair_work(xcol, ycol, xorder, xcount, yorder, ycount, xpresent, ypresent, min_rows,
               want_spearman, want_kendall, want_distance):
    """Everything compiled one regular pair needs, in one call (fewer transitions per pair).

    ``regular`` is False when fewer than ``min_rows`` rows remain or a side
    is constant; the other outputs are then not computed.
    """
    xp, yp, ox, oy = _pair_view(xcol, ycol, xorder, xcount, yorder, ycount, xpresent, ypresent)
    n = xp.shape[0]
    sums = (np.zeros(3, np.int64), np.zeros(3, np.int64))
    counts = (0, 0, 0, 0, 0.0, 0.0, 0.0, 0.0)
    empty_f = np.empty(0)
    empty_i = np.empty(0, np.int64)
    regular = (n >= min_rows and xp[ox[0]] != xp[ox[n - 1]] and yp[oy[0]] != yp[oy[n - 1]])
    if not regular:
        return regular, xp, yp, ox, oy, sums, counts, empty_f, empty_f, empty_i, empty_i
    if want_spearman:
        sums = _spearman_sums(xp, ox, yp, oy)
    xc = empty_f
    yc = empty_f
    order = empty_i
    y_order = empty_i
    merged = True
    if want_distance:
        if n % 2:
            mx = xp[ox[n // 2]]
            my = yp[oy[n // 2]]
        else:
            mx = (xp[ox[n // 2 - 1]] + xp[ox[n // 2]]) / 2.0
            my = (yp[oy[n // 2 - 1]] + yp[oy[n // 2]]) / 2.0
        xc = xp - mx
        yc = yp - my
        order, y_order, merged = _distance_orders(xp, xc, ox, yp, yc, oy)
    if want_kendall:
        if want_distance and n >= 4 and not merged:
            # the discordant pairs come with the distance cross sum (counts[0] = -1 until then)
            counts = _kendall_ties(xp, ox, yp, oy)
        else:
            counts = _kendall_counts(xp, ox, yp, oy)
    return regular, xp, yp, ox, oy, sums, counts, xc, yc, order, y_order


# --- public functions ---------------------------------------------------------------

@dataclass(frozen=True)
class PreparedColumns:
    """Every column sorted once: column-major values, presence and stable orders.

    Slot ``k`` holds data column ``columns[k]`` (``slot`` maps back).
    ``orders[:counts[k], k]`` are the rows where it is present, in ascending
    value (ties by row); ``present`` already folds in the row mask of the
    complete-rows policy. ``finite[k]`` is False when the column holds an
    infinite value (such pairs take the per-pair path). ``distance_sides``
    caches each column's own part of the distance statistics
    (:func:`pairlens.core.distance.column_side`) for the pairs that use all of
    its present rows, filled as pairs meet it.
    """

    values: np.ndarray
    present: np.ndarray
    orders: np.ndarray
    counts: np.ndarray
    finite: np.ndarray
    columns: tuple
    slot: dict
    distance_sides: dict = field(default_factory=dict, compare=False, repr=False)


def prepare_columns(data: np.ndarray, row_mask: np.ndarray | None = None,
                    columns=None) -> PreparedColumns:
    """Sort each column of ``data`` once (NaN and masked rows last).

    Parameters
    ----------
    data : numpy.ndarray
        (n, p) float array, NaN for missing values.
    row_mask : numpy.ndarray, optional
        Rows allowed at all (the complete-rows policy); None allows every row.
    columns : sequence of int, optional
        The data columns to prepare (default: all), in slot order.

    Returns
    -------
    PreparedColumns
        O(n p) memory: a column-major copy of the values, the presence mask
        and one int64 order per column.

    Notes
    -----
    One stable argsort per column, O(n log n) each; every pair then derives
    its orders in O(n) (:func:`pair_view`).

    Examples
    --------
    >>> prep = prepare_columns(np.array([[2.0, 1.0], [np.nan, 0.0], [1.0, 5.0]]))
    >>> prep.orders[:prep.counts[0], 0].tolist(), int(prep.counts[1])
    ([2, 0], 3)
    """
    data = np.asarray(data, dtype=np.float64)
    columns = tuple(range(data.shape[1])) if columns is None else tuple(int(c) for c in columns)
    values = np.asfortranarray(data[:, list(columns)])
    present = np.asfortranarray(~np.isnan(values))
    if row_mask is not None:
        present &= np.asarray(row_mask, dtype=bool)[:, None]
    n, p = values.shape
    orders = np.empty((n, p), dtype=np.int64, order="F")
    counts = np.empty(p, dtype=np.int64)
    finite = np.empty(p, dtype=bool)
    for j in range(p):
        rows = np.flatnonzero(present[:, j])
        col = values[rows, j]
        finite[j] = bool(np.isfinite(col).all())
        orders[:rows.size, j] = rows[np.argsort(col, kind="stable")]
        orders[rows.size:, j] = -1
        counts[j] = rows.size
    return PreparedColumns(values, present, orders, counts, finite, columns,
                           {c: k for k, c in enumerate(columns)})


@dataclass
class PairView:
    """One pair's complete rows: values in row order and both stable orders."""

    x: np.ndarray
    y: np.ndarray
    x_order: np.ndarray
    y_order: np.ndarray

    @property
    def n(self) -> int:
        return int(self.x.shape[0])

    def x_constant(self) -> bool:
        return self.n == 0 or self.x[self.x_order[0]] == self.x[self.x_order[-1]]

    def y_constant(self) -> bool:
        return self.n == 0 or self.y[self.y_order[0]] == self.y[self.y_order[-1]]


def pair_view(prep: PreparedColumns, i: int, j: int) -> PairView:
    """The complete rows of columns i and j with their orders, in O(n).

    Examples
    --------
    >>> prep = prepare_columns(np.array([[2.0, 1.0], [np.nan, 0.0], [1.0, 5.0]]))
    >>> v = pair_view(prep, 0, 1)
    >>> v.x.tolist(), v.x_order.tolist(), v.y_order.tolist()
    ([2.0, 1.0], [1, 0], [0, 1])
    """
    xp, yp, ox, oy = _pair_view(prep.values[:, i], prep.values[:, j], prep.orders[:, i],
                                int(prep.counts[i]), prep.orders[:, j], int(prep.counts[j]),
                                prep.present[:, i], prep.present[:, j])
    return PairView(xp, yp, ox, oy)


def spearman_sums(view: PairView) -> tuple[float, float, float]:
    """sum rx ry, sum rx^2, sum ry^2 of the centred mid-ranks: exact integer sums, rounded once.

    Examples
    --------
    >>> v = PairView(np.array([1.0, 2.0, 2.0]), np.array([3.0, 1.0, 2.0]),
    ...              np.array([0, 1, 2]), np.array([1, 2, 0]))
    >>> spearman_sums(v)
    (-1.5, 1.5, 2.0)
    """
    return _rank_sums_as_floats(*_spearman_sums(view.x, view.x_order, view.y, view.y_order))


def kendall_order(view: PairView) -> np.ndarray:
    """Rows sorted by x and, within tied x, by y (O(n), from the two orders)."""
    return _lex_order(view.x, view.x_order, view.y_order)


def kendall_counts_view(view: PairView) -> tuple:
    """The pair counts of :func:`pairlens.core.rank.knight_counts`, from the two orders in O(n log n).

    Returns ``(discordant, tied_x, tied_y, tied_xy, x_t3, x_t5, y_t3, y_t5)``.

    Examples
    --------
    >>> v = PairView(np.array([1.0, 2.0, 2.0, 3.0]), np.array([1.0, 3.0, 2.0, 2.0]),
    ...              np.array([0, 1, 2, 3]), np.array([0, 2, 3, 1]))
    >>> kendall_counts_view(v)[:4]
    (1, 1, 1, 0)
    """
    return _kendall_counts(view.x, view.x_order, view.y, view.y_order)


def median_sorted(values: np.ndarray, order: np.ndarray) -> float:
    """``np.median(values)`` from an ascending order: the middle value or the mean of the two.

    Examples
    --------
    >>> median_sorted(np.array([4.0, 1.0, 3.0, 2.0]), np.array([1, 3, 2, 0]))
    2.5
    """
    n = order.shape[0]
    if n % 2:
        return float(values[order[n // 2]])
    return float((values[order[n // 2 - 1]] + values[order[n // 2]]) / 2.0)


def distance_orders(view: PairView) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Median-centred columns and the two stable orders the distance kernels need.

    Returns ``(xc, yc, x_order, y_order)`` for
    :func:`pairlens.core.distance.centred_statistics_presorted`.
    """
    xc = view.x - median_sorted(view.x, view.x_order)
    yc = view.y - median_sorted(view.y, view.y_order)
    order, y_order, _ = _distance_orders(view.x, xc, view.x_order, view.y, yc, view.y_order)
    return xc, yc, order, y_order


def xi_order(values: np.ndarray, order: np.ndarray, keys_for) -> np.ndarray:
    """The predictor order of xi: stable, ties broken by the keys ``keys_for()`` returns.

    ``keys_for`` is called only when there are ties, so the random stream is
    drawn exactly when :func:`pairlens.core.chatterjee.xi` draws it.
    """
    if not _has_ties(values, order):
        return order
    return _order_ties_by_key(values, order, np.ascontiguousarray(keys_for(), dtype=np.float64))


def rank_counts(values: np.ndarray, order: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(r, l) by row: #{j: v_j <= v_i} and #{j: v_j >= v_i}."""
    return _rank_counts(values, order)


def pair_work(prep: PreparedColumns, i: int, j: int, min_rows: int, *, spearman: bool, kendall: bool,
              distance: bool):
    """:func:`pair_view` plus, for a regular pair, the chosen measures' compiled parts in one call.

    Returns ``(regular, view, spearman_sums, kendall_counts, distance_inputs)``:
    ``regular`` is False when fewer than ``min_rows`` rows remain or a side is
    constant (the rest is then not computed); the other parts are what
    :func:`spearman_sums`, :func:`kendall_counts_view` and
    :func:`distance_orders` return, or None when not asked for.

    When both Kendall and the distance orders are asked for (and n >= 4),
    ``kendall_counts[0]`` is -1: the discordant pairs are then
    ``DistanceStatistics.discordant`` of the same pair, counted by the cross
    sum's Fenwick tree, unless centring merged two values of a column (then
    the counts are complete here).
    """
    regular, xp, yp, ox, oy, sums, counts, xc, yc, order, y_order = _pair_work(
        prep.values[:, i], prep.values[:, j], prep.orders[:, i], int(prep.counts[i]), prep.orders[:, j],
        int(prep.counts[j]), prep.present[:, i], prep.present[:, j], int(min_rows), bool(spearman),
        bool(kendall), bool(distance))
    view = PairView(xp, yp, ox, oy)
    if not regular:
        return False, view, None, None, None
    return (True, view, _rank_sums_as_floats(*sums) if spearman else None, counts if kendall else None,
            (xc, yc, order, y_order) if distance else None)


@dataclass
class PresortedPair:
    """One regular pair's presorted parts, as a registry entry's ``presorted`` hook reads them.

    ``x`` and ``y`` are the direction being measured (swapped for the reverse
    direction of an asymmetric measure); the parts computed by
    :func:`pair_work` are shared by every measure of the pair, and the
    distance statistics are computed at most once.
    """

    view: PairView
    swapped: bool
    rank_sums: tuple | None
    kendall_counts: tuple | None
    distance_inputs: tuple | None
    shared: dict = field(default_factory=dict)   # parts computed once per pair, whichever direction
    # (prepared columns, slot of x, slot of y) when the pair uses every present row of both columns:
    # their distance sides are then the columns' own, computed once per column
    whole_columns: tuple | None = None

    @property
    def n(self) -> int:
        return self.view.n

    @property
    def x(self) -> np.ndarray:
        return self.view.y if self.swapped else self.view.x

    @property
    def y(self) -> np.ndarray:
        return self.view.x if self.swapped else self.view.y

    @property
    def x_order(self) -> np.ndarray:
        return self.view.y_order if self.swapped else self.view.x_order

    @property
    def y_order(self) -> np.ndarray:
        return self.view.x_order if self.swapped else self.view.y_order

    def distance_statistics(self):
        """The pair's centred distance statistics (dCor, its bias-corrected form, Kendall's discordances)."""
        st = self.shared.get("distance")
        if st is None:
            from .distance import centred_statistics_presorted, column_side

            xc, yc, order, y_order = self.distance_inputs
            sides = None
            if self.whole_columns is not None:
                prep, i, j = self.whole_columns
                cache = prep.distance_sides
                if i not in cache:
                    cache[i] = column_side(xc, order)
                if j not in cache:
                    cache[j] = column_side(yc, order[y_order])
                sides = (cache[i], cache[j])
            st = self.shared["distance"] = centred_statistics_presorted(xc, yc, order, y_order, sides)
        return st

    def untied(self) -> bool:
        """Neither column holds two equal values (O(n) from the orders, computed once per pair)."""
        flag = self.shared.get("untied")
        if flag is None:
            v = self.view
            flag = self.shared["untied"] = not (_has_ties(v.x, v.x_order) or _has_ties(v.y, v.y_order))
        return flag

    def tie_log_factorials(self) -> float:
        """ln of the product of c! over the runs of c tied values in both columns (computed once per pair).

        The multiplicity K of the permutation floor K/n!
        (:func:`pairlens.core.testing.permutation_floor`) is at most this product:
        the joint tie counts only divide it.
        """
        value = self.shared.get("tie_log")
        if value is None:
            v = self.view
            value = self.shared["tie_log"] = (_tie_log_factorials(v.x, v.x_order)
                                              + _tie_log_factorials(v.y, v.y_order))
        return value

    def direction(self, swapped: bool) -> "PresortedPair":
        """The same parts seen from the other direction when ``swapped`` differs."""
        if swapped == self.swapped:
            return self
        return PresortedPair(self.view, swapped, self.rank_sums, self.kendall_counts, self.distance_inputs,
                             self.shared, self.whole_columns)


def warm_kernels() -> None:
    """Load (or compile) every kernel once, e.g. in a parent before it forks workers."""
    data = np.array([[1.0, 2.0], [3.0, 1.0], [2.0, np.nan], [2.0, 0.5], [0.0, 0.5]])
    prep = prepare_columns(data)
    view = pair_view(prep, 0, 1)
    spearman_sums(view)
    kendall_counts_view(view)
    distance_orders(view)
    xi_order(view.x, view.x_order, lambda: np.linspace(0.1, 0.9, view.n))
    rank_counts(view.y, view.y_order)
