"""What pairlens computes and how, as structured data for the report and the dashboard.

The measure entries come from :data:`pairlens.core.registry.MEASURES` (formula,
reference, default test, interval), so a new measure shows up here without
an edit. The text about p-values, q-values, intervals, the Gaussian fit and
the verdict is ours. Everything is plain strings, lists and dicts, ready for
a template (autoescaped) or for JSON.
"""

from __future__ import annotations

import re
from collections import Counter
from typing import Iterable

from . import config
from .core.registry import MEASURES, PARTIAL_MEASURES, get_measure
from .formatting import RULE

__all__ = ["ADJUSTMENT_TEXT", "measure_methods", "inference_methods", "cautions", "methods_content"]

# Reference details below were written down from memory and checked only
# against the registry's own reference strings where they overlap.
_BH = ("Benjamini, Y. & Hochberg, Y. (1995) J. R. Stat. Soc. B 57:289-300, "
       "doi:10.1111/j.2517-6161.1995.tb02031.x")
_HOLM = "Holm, S. (1979) Scand. J. Stat. 6:65-70"
_PHIPSON = ("Phipson, B. & Smyth, G.K. (2010) Stat. Appl. Genet. Mol. Biol. 9(1):39, "
            "doi:10.2202/1544-6115.1585")
_HENZE_ZIRKLER = ("Henze, N. & Zirkler, B. (1990) Commun. Stat. Theory Methods 19:3595-3617, "
                  "doi:10.1080/03610929008830400")
_SZEKELY_2007 = ("Szekely, G.J., Rizzo, M.L. & Bakirov, N.K. (2007) Ann. Statist. 35:2769-2794, "
                 "doi:10.1214/009053607000000505")
_FISHER = "Fisher, R.A. (1921) Metron 1:3-32"

ADJUSTMENT_TEXT: dict[str, dict[str, str]] = {
    "bh": {
        "label": "Benjamini-Hochberg (false discovery rate)",
        "formula": "with the m defined p-values of a measure sorted, p(1) <= ... <= p(m): "
                   "q(i) = min over j >= i of min(1, m p(j) / j)",
        "meaning": "Among pairs with q below a level a, the expected share of false discoveries is at "
                   "most a when the tests are independent or positively dependent.",
        "reference": _BH,
    },
    "holm": {
        "label": "Holm step-down (family-wise error rate)",
        "formula": "with the m defined p-values of a measure sorted: "
                   "q(i) = max over j <= i of min(1, (m - j + 1) p(j))",
        "meaning": "The chance of even one false discovery among pairs with q below a is at most a, "
                   "under any dependence between the tests.",
        "reference": _HOLM,
    },
    "none": {
        "label": "no adjustment",
        "formula": "q = p",
        "meaning": "q-values equal the raw p-values: with many pairs, some small p-values are expected "
                   "by chance alone.",
        "reference": "",
    },
}


def _range_text(lower: float, upper: float) -> str:
    return f"[{lower:g}, {upper:g}]"


def measure_methods(measures: Iterable[str] | None = None,
                    methods_seen: dict[str, Counter] | None = None) -> list[dict]:
    """One entry per measure: label, formula, range, test, interval, reference.

    Parameters
    ----------
    measures : iterable of str, optional
        Registry names to describe, in this order (default: all of them).
    methods_seen : dict, optional
        Measure name -> Counter of the method strings that produced its
        p-values in an analysis; listed under ``"methods_used"``.
    """
    names = list(MEASURES) if measures is None else list(measures)
    out = []
    for name in names:
        m = get_measure(name)
        seen = (methods_seen or {}).get(name, Counter())
        out.append({
            "name": m.name,
            "label": m.label,
            "family": m.family,
            "formula": m.formula,
            "range": _range_text(m.lower, m.upper),
            "symmetric": m.symmetric,
            "signed": m.signed,
            "groups": m.multivariate,
            "test": m.default_test,
            "interval": m.interval or "none reported",
            "reference": m.reference,
            "methods_used": [{"method": k or "(not recorded)", "pairs": v} for k, v in seen.most_common()],
        })
    return out


_PERMUTATION_FLOOR = (
    "No p-value is reported below the smallest value a permutation test on the same rows can give (for n "
    "rows without ties, 1/n! or 2/n!). Where an approximation would go lower on a very small sample, the "
    "p-value is raised to that smallest value and the note of the pair says so.")


def _pvalue_notes(measures, permutations: int) -> list[str]:
    """Each measure's own paragraph on its p-value (registry ``pvalue_note``), where it has one."""
    notes = (get_measure(m).pvalue_note for m in measures)
    return [text for note in notes if note is not None and (text := note(permutations))]


def inference_methods(*, adjust: str = config.DEFAULT_ADJUST, confidence: float = config.DEFAULT_CONFIDENCE,
                      permutations: int = 0, missing: str = config.DEFAULT_MISSING,
                      measures: Iterable[str] | None = None, general: bool = False) -> list[dict]:
    """How p-values, q-values, intervals, the Gaussian fit and the verdict were obtained.

    Each entry is ``{"title", "paragraphs": [str], "formula": str, "references": [str]}``.
    ``measures`` (default: all) decides measure-specific cautions. ``general`` (the
    dashboard's methods page) describes every choice instead of one analysis's settings.
    """
    measures = list(MEASURES) if measures is None else list(measures)
    if general:
        return _general_inference(measures)
    adj = ADJUSTMENT_TEXT[adjust]
    level = f"{confidence * 100:g}%"
    sections = [
        {
            "title": "p-values",
            "paragraphs": [
                "Every p-value tests the null hypothesis that the two variables are independent, with the "
                "default test of its measure listed above; the method that produced each p-value is "
                "recorded and counted per measure.",
                (f"Permutation p-values were requested with B = {permutations} resamples: the rows of y are "
                 "shuffled against fixed x, the statistic is recomputed for each shuffle, and the observed "
                 "value is counted as one of the resamples so that a p-value is never zero."
                 if permutations else
                 "No permutations were requested, so every p-value comes from the closed-form or "
                 "approximate null distribution named for its measure."),
                *_pvalue_notes(measures, permutations),
                _PERMUTATION_FLOOR,
            ],
            "formula": "p = (1 + k) / (B + 1), k = resamples with a statistic at least the observed one"
                       if permutations else "",
            "references": ([_PHIPSON] if permutations else [])
                          + [ref for m in measures for ref in get_measure(m).pvalue_references],
        },
        {
            "title": "q-values (many pairs)",
            "paragraphs": [
                f"p-values were adjusted with {adj['label']}, separately within each measure over all of "
                "its pairs (both directions of an asymmetric measure count as pairs). Pairs whose p-value "
                "is undefined are left out of m, so they do not make the others harder to detect.",
                adj["meaning"],
                f"The report calls a pair significant when its q-value is below {config.SIGNIFICANCE_LEVEL:g}.",
            ],
            "formula": adj["formula"],
            "references": [adj["reference"]] if adj["reference"] else [],
        },
        {
            "title": "Confidence intervals",
            "paragraphs": [
                f"Intervals are at the {level} level. For the correlation coefficients the estimate is "
                "moved to Fisher's z = atanh(r), an interval of z +/- z_crit SE is built with the standard "
                "error named for each measure, and both ends are moved back with tanh. Measures without a "
                "closed-form interval report none.",
            ],
            "formula": "[tanh(atanh(r) - z_crit SE), tanh(atanh(r) + z_crit SE)]",
            "references": [_FISHER],
        },
        {
            "title": "Missing values",
            "paragraphs": [
                "pairwise: each pair uses every row where both of its variables are present, so n can "
                "differ between pairs." if missing == "pairwise" else
                "complete: only rows where every analysed variable is present are used, so every pair has "
                "the same n.",
                "Infinite values are counted as missing. The column n of the pair table is the number of "
                "rows used.",
            ],
            "formula": "",
            "references": [],
        },
        {
            "title": "Bivariate Gaussian fit",
            "paragraphs": [
                "For each pair shown in detail a bivariate normal is fitted: the sample means and the "
                "covariance matrix (divisor n - 1). Its ellipses hold 50%, 90% and 99% of the fitted mass; "
                "its conditional mean line E[y | x] with the residual standard deviation shows what a linear "
                "Gaussian model predicts.",
                "From the fitted correlation rho the measures a Gaussian would imply are computed and shown "
                "beside the observed ones; a large gap means the Gaussian picture misleads for that pair.",
                "Joint normality is tested with the Henze-Zirkler statistic"
                f" (on a seeded random subsample of {config.HZ_MAX_ROWS} rows for larger samples). Marginals "
                "can each look normal while the pair is not jointly normal; zero correlation then does not "
                "mean independence.",
            ],
            "formula": "Kendall tau = (2/pi) asin(rho); Spearman rho_s = (6/pi) asin(rho/2); "
                       "mutual information = -ln(1 - rho^2)/2; distance correlation from Theorem 7 of "
                       "Szekely, Rizzo & Bakirov (2007)",
            "references": [_HENZE_ZIRKLER, _SZEKELY_2007],
        },
        {
            "title": "Verdict",
            "paragraphs": [
                "Each pair shown in detail gets a plain-words label (" + ", ".join(_verdict_labels()) + ") "
                "from its q-values, the gaps between measures and the Gaussian fit, and the influence of "
                "single points. The label is a reading aid, not a test; the reasons listed with it say what "
                "it rests on.",
            ],
            "formula": "",
            "references": [],
        },
        {"title": "How numbers are written", "paragraphs": [RULE], "formula": "", "references": []},
    ]
    return sections


def _general_inference(measures) -> list[dict]:
    """:func:`inference_methods` for no analysis in particular: every option, no settings."""
    one = {s["title"]: s for s in inference_methods(measures=measures, permutations=1)}
    one["p-values"]["paragraphs"] = [
        one["p-values"]["paragraphs"][0],
        "With permutations requested (B resamples), the rows of y are shuffled against fixed x, the "
        "statistic is recomputed for each shuffle, and the observed value is counted as one of the "
        "resamples so that a p-value is never zero. Without them, every p-value comes from the "
        "closed-form or approximate null distribution named for its measure.",
        *_pvalue_notes(measures, 0),
    ]
    q = one["q-values (many pairs)"]
    q["paragraphs"] = [
        "p-values are adjusted separately within each measure over all of its pairs (both directions of "
        "an asymmetric measure count as pairs), by the method chosen for the analysis. Pairs whose p-value "
        "is undefined are left out of m, so they do not make the others harder to detect.",
        *(f"{a['label']}: {a['meaning']} ({a['formula']})" for a in ADJUSTMENT_TEXT.values()),
        f"A pair is called significant when its q-value is below {config.SIGNIFICANCE_LEVEL:g}.",
    ]
    q["formula"] = ""
    q["references"] = [a["reference"] for a in ADJUSTMENT_TEXT.values() if a["reference"]]
    ci = one["Confidence intervals"]
    ci["paragraphs"] = [ci["paragraphs"][0].replace(
        ci["paragraphs"][0].split(". ")[0] + ". ",
        f"Intervals are at the confidence level chosen for the analysis ({config.DEFAULT_CONFIDENCE * 100:g}% "
        "unless changed). ")]
    one["Missing values"]["paragraphs"] = [
        "pairwise (the default): each pair uses every row where both of its variables are present, so n "
        "can differ between pairs. complete: only rows where every analysed variable is present are used, "
        "so every pair has the same n.",
        one["Missing values"]["paragraphs"][1],
    ]
    return list(one.values())


def _verdict_labels() -> list[str]:
    try:
        from .core.verdict import LABELS
    except ImportError:  # pragma: no cover - the verdict module is part of the package
        return []
    from .core.verdict_categorical import CATEGORICAL_LABELS

    return list(dict.fromkeys([*LABELS, *CATEGORICAL_LABELS]))


def _categorical_entry() -> dict:
    """Column kinds and the measures of pairs with a categorical side (issue 18)."""
    return {
        "title": "Categorical columns",
        "paragraphs": [
            f"A text or true/false column with at most {config.CATEGORICAL_MAX_LEVELS} levels (and at most half as "
            "many levels as filled cells) is categorical; so is a column of whole-number codes with at most "
            f"{config.CLASS_CODE_MAX_LEVELS} values (two values at any size, more from {config.CLASS_CODE_MIN_ROWS} "
            "rows). --categorical COL,... makes a numeric column with few values categorical, --numeric COL,... keeps "
            "a code a number; a text column cannot become a number. A column with more levels is left out with the "
            "fix (merge levels, or raise PAIRLENS_CATEGORICAL_MAX_LEVELS).",
            "Each pair takes the measures that apply to its kinds (the registry says which): two numeric columns "
            "the numeric measures; a numeric and a categorical column eta with the one-way ANOVA F test, the "
            "Kruskal-Wallis test with the eta of the mid-ranks, and distance correlation; two categorical columns "
            "Cramér's V with Bergsma's bias correction and the chi-square test, and distance correlation. "
            "Pearson, Spearman, Kendall and xi never run on a categorical column: its codes have no order or "
            "spacing.",
            "Distance correlation needs a distance between rows. A categorical column's levels are embedded as "
            "the unit vectors of their own axes divided by sqrt(2), so two rows of the same level are at distance "
            "0 and two of different levels at distance sqrt(1/2 + 1/2) = 1: the discrete metric. It invents no "
            "order or spacing, treats every level alike, and energy statistics apply to any metric space of "
            "negative type, which the discrete metric is (Lyons 2013); the same gamma approximation and "
            "permutation tests then hold as for numbers.",
            "Chi-square test: the chi-square law with (r-1)(k-1) degrees of freedom unless Cochran's (1954) rule "
            "fails (an expected count below 1, or more than 20% of them below 5); then 1,999 random relabellings "
            "of one column (p = (1 + count at least as large) / (B + 1)). Kruskal-Wallis: chi-square with k-1 "
            "degrees of freedom unless a level has fewer than 5 rows, then 1,999 relabellings. The ANOVA F test "
            "uses the F law; omega-squared (Hays 1963), the bias-corrected share of variance explained, is given "
            "beside eta.",
            "Verdicts of these pairs: 'groups differ' (a location test, F or Kruskal-Wallis, has q below the "
            "level), 'groups differ in spread or shape' (only distance correlation does), 'levels associated' "
            "(two categorical columns, any test), else 'no evidence of dependence'. The pair view draws boxes "
            "with every row and each level's mean, or the contingency table shaded by adjusted standardised "
            "residuals (Haberman 1973).",
        ],
        "formula": "V~ = sqrt(max(0, chi^2/n - (r-1)(k-1)/(n-1)) / min(r~-1, k~-1)), r~ = r - (r-1)^2/(n-1); "
                   "eta^2 = SS_between / SS_total; omega^2 = (SS_between - (k-1) MS_within) / (SS_total + MS_within); "
                   "H = (n-1) SS_between(ranks) / SS_total(ranks); discrete metric d(a, b) = 1[a != b]",
        "references": [
            "Bergsma, W. (2013) J. Korean Stat. Soc. 42:323-328, doi:10.1016/j.jkss.2012.10.002",
            "Cochran, W.G. (1954) Biometrics 10:417-451, doi:10.2307/3001616",
            "Kruskal, W.H. & Wallis, W.A. (1952) JASA 47:583-621, doi:10.1080/01621459.1952.10483441",
            "Lyons, R. (2013) Ann. Probab. 41:3284-3305, doi:10.1214/12-AOP803",
            "Haberman, S.J. (1973) Biometrics 29:205-220, doi:10.2307/2529686",
            "Hays, W.L. (1963) Statistics for Psychologists",
        ],
    }


def cautions() -> list[dict]:
    """What a reader must keep in mind; ``{"title", "text"}`` each."""
    return [
        {"title": "Association is not causation",
         "text": "A strong association says the two variables move together in these data. It does not say "
                 "that one drives the other: a third variable, the way rows were selected, or a shared trend "
                 "over time can produce it."},
        {"title": "Many tests",
         "text": "Testing every pair makes some small p-values certain by chance alone. Read the q-values, "
                 "not the raw p-values, and treat the strongest pairs as hypotheses to confirm on new data, "
                 "not as findings."},
        {"title": "Outliers and missing data",
         "text": "A few extreme rows can create or hide an association; look at the scatter behind every "
                 "number you rely on. Rows with missing values were left out as described under Methods, "
                 "which biases results when values are missing for a reason related to the variables."},
        {"title": "Health and safety",
         "text": "Where a decision touches health or safety, these results are a starting point for a "
                 "qualified expert's review, never a substitute for it."},
    ]


# The per-pair numbers of the tests for rows in time order (n*, block length), left out when methods are counted.
_SERIAL_DETAIL = re.compile(r" \(n\* = [^)]*\)|, block \d+ rows?$")


def _ordered_entry(settings) -> dict:
    how = "as in the file" if not settings.ordered else f"sorted by {settings.ordered} (not analysed itself)"
    paragraphs = [f"The rows were declared in time order, {how}"
                  + (", and every column replaced by its first differences." if settings.difference else ".")
                  + " Consecutive rows of a series are not independent, so each measure used its test for "
                    "serially dependent rows; each pair's method names it with its effective rows n* or block length."]
    paragraphs += [f"{MEASURES[m].label}: {MEASURES[m].serial_test}." for m in settings.measures if MEASURES[m].serial_test]
    paragraphs.append("A pair with a trending column (augmented Dickey-Fuller test at 5 %, MacKinnon p-values) "
                      "gets no p-value and the verdict 'not tested (trending)', neither dependent nor independent: "
                      "levels of trending series correlate by chance (Yule 1926; Granger & Newbold 1974); analyse "
                      "differences instead. Levels of these tests: README, 'Rows in time order'.")
    return {"title": "Rows in time order", "paragraphs": paragraphs,
            "formula": "1/n* = 1/n + (2/n) sum_{k=1}^{n/5} (n-k)/n rho_x(k) rho_y(k)",
            "references": ["Bartlett, M.S. (1935) J. R. Stat. Soc. 98:536-543, doi:10.2307/2342284",
                           "Pyper, B.J. & Peterman, R.M. (1998) Can. J. Fish. Aquat. Sci. 55:2127-2140, doi:10.1139/f98-104",
                           "Politis, D.N. & White, H. (2004) Econometric Reviews 23:53-70, doi:10.1081/ETC-120028836",
                           "Dickey, D.A. & Fuller, W.A. (1979) JASA 74:427-431, doi:10.1080/01621459.1979.10482531",
                           "Granger, C.W.J. & Newbold, P. (1974) J. Econometrics 2:111-120, doi:10.1016/0304-4076(74)90034-7"]}


def _given_entry(settings) -> dict:
    """--given: what is held fixed, how, and what the partial tests do and do not promise."""
    cols = ", ".join(settings.given) if settings is not None and settings.given else "the given columns Z"
    entries = [PARTIAL_MEASURES[n] for n in PARTIAL_MEASURES]
    paragraphs = [
        f"Association given {cols} (--given): each chosen measure with a conditional variant gets a second "
        "row per pair, the same pair with the given columns held fixed; the given columns themselves are not "
        "paired. A pair's conditional rows are those where x, y and every given column are present.",
        "Partial Pearson r: the Pearson correlation of the residuals of x and of y after least squares on an "
        "intercept and the given columns; t test on n - 2 - k degrees of freedom (k regressors), Fisher-z "
        "interval with SE 1/sqrt(n - 3 - k). Partial Spearman: the same on mid-ranks (numeric given columns "
        "ranked too). Partial distance correlation: the U-centred distance matrices of x and y projected on "
        "the complement of that of the given columns (numeric ones scaled to unit SD), with the permutation "
        f"test of Szekely & Rizzo (2014), {config.PARTIAL_DCOR_PERMUTATIONS} relabellings, up to "
        f"{config.PARTIAL_DCOR_MAX_N} rows.",
        "Class codes among the given columns are handled by indicator regression, not stratification: a "
        f"given column with at most {config.GIVEN_INDICATOR_MAX_LEVELS} distinct values enters as one "
        "indicator (0/1) column per level but the first, so its effect may differ freely between levels. "
        "Text columns cannot be given yet (they are left out of the numeric table).",
        "Each conditional measure's q-values are adjusted over its own pairs: a family of its own, separate "
        "from the unconditional measure's.",
        "What the tests promise. Partial Pearson holds its level when the given columns act linearly on x "
        "and y (checked by simulation with a shared driver, Gaussian and skewed noise). Partial Spearman "
        "removes only the part of the ranks linear in the given columns' ranks: with a shared normal driver "
        "it rejected 6.1-6.6% at alpha 0.05 (30 and 150 rows). The partial distance correlation test is a "
        "test of zero partial distance covariance, not of conditional independence (Szekely & Rizzo 2014, "
        "section 4.2): with x and y independent given a shared linear driver it rejected 23% at alpha 0.05 "
        "(30 rows). A significant partial dCor therefore does not by itself show dependence beyond the "
        "given columns; read it with the partial correlations and the residual scatter.",
        "A dependence that vanishes given a column may run through that column (a common driver or a "
        "mediator); one that appears may be a collider effect, created by holding fixed a column that both "
        "affect. Neither is established by these numbers alone.",
    ]
    return {"title": "Association given other columns", "paragraphs": paragraphs,
            "formula": "r_xy.Z = corr(x - P_Z x, y - P_Z y);  t = r sqrt((n-2-k)/(1-r^2));  "
                       "R*(x, y; Z) = <P(A~), P(B~)> / (|P(A~)| |P(B~)|)",
            "references": [e.reference for e in entries]}


def methods_content(measures: Iterable[str] | None = None, *, settings=None, pair_table=None) -> dict:
    """Everything for a methods section: measures, inference and cautions.

    Parameters
    ----------
    measures : iterable of str, optional
        Measures to describe (default: those of ``settings``, else all).
    settings : pairlens.engine.AnalysisSettings, optional
        Adjustment, confidence, permutations and missing policy to describe.
    pair_table : pairlens.engine.PairTable, optional
        When given, the p-value methods actually used are counted per measure.
    """
    if measures is None and settings is not None:
        measures = settings.table_measures() if hasattr(settings, "table_measures") else settings.measures
    seen: dict[str, Counter] = {}
    if pair_table is not None:
        for row in pair_table.rows:
            if row.p_value == row.p_value:  # NaN p-values were not produced by any method
                seen.setdefault(row.measure, Counter())[_SERIAL_DETAIL.sub("", row.method)] += 1
    kwargs = {"measures": measures, "general": settings is None}
    if settings is not None:
        kwargs.update(adjust=settings.adjust, confidence=settings.confidence,
                      permutations=settings.permutations, missing=settings.missing)
    inference = inference_methods(**kwargs)
    if settings is not None and getattr(settings, "ordered", None) is not None:
        inference = [*inference, _ordered_entry(settings)]
    if settings is None or getattr(settings, "categorical", ()):
        inference = [*inference, _categorical_entry()]
    if settings is None or getattr(settings, "given", ()):
        inference = [*inference, _given_entry(settings)]
    return {
        "measures": measure_methods(measures, seen),
        "inference": inference,
        "cautions": cautions(),
    }
