"""The ``pairlens`` command: serve, pairs, inspect, report.

Bad input ends with exit status 2 and one line on stderr; no traceback reaches
the user (set PAIRLENS_DEBUG=1 to see one).
"""

from __future__ import annotations

import argparse
import json
import math
import os
import sys
import time
from pathlib import Path

from . import __version__, config

EXIT_BAD_INPUT = 2
EXIT_INTERNAL = 1


class UsageError(Exception):
    """A problem with the command line itself; reported on one line with exit status 2."""


class _Parser(argparse.ArgumentParser):
    def error(self, message: str):  # argparse prints usage + exits 2; we want one line
        raise UsageError(f"{self.prog}: {message}")


class _HelpFormatter(argparse.HelpFormatter):
    """Shows each option's default after its help, unless the default is empty or already stated."""

    def _get_help_string(self, action):
        text = action.help or ""
        default = action.default
        empty = default is None or default is False or default is argparse.SUPPRESS or default == []
        if "%(default)" in text or "default:" in text or empty or not action.option_strings:
            return text
        return f"{text} (default: %(default)s)"


def _add_analysis_options(p: argparse.ArgumentParser) -> None:
    p.add_argument("data", metavar="DATA", help="table file: .csv .tsv .txt .csv.gz .xlsx .parquet")
    p.add_argument("--sheet", help="worksheet of an .xlsx file (default: the first)")
    p.add_argument("--measures", metavar="LIST",
                   help="comma-separated measures from: %s (default: %s)"
                        % (", ".join(_measure_names()), ",".join(config.DEFAULT_MEASURES)))
    p.add_argument("--columns", metavar="LIST", help="comma-separated numeric columns to use (default: all)")
    p.add_argument("--group", action="append", default=[], metavar="NAME=COL,COL",
                   help="analyse several columns as one multivariate variable (repeatable; default: none)")
    p.add_argument("--missing", choices=config.MISSING_POLICIES, default=config.DEFAULT_MISSING,
                   help="pairwise: each pair uses the rows where both values are present; "
                        "complete: only rows with no missing value in the chosen columns")
    p.add_argument("--adjust", choices=config.ADJUST_METHODS, default=config.DEFAULT_ADJUST,
                   help="multiple-testing adjustment of each measure's p-values into q-values: "
                        "bh = Benjamini-Hochberg, holm = Holm, none = q equals p")
    p.add_argument("--confidence", type=float, default=config.DEFAULT_CONFIDENCE, metavar="LEVEL",
                   help="confidence level of the intervals, at least 0.5 and below 1")
    p.add_argument("--permutations", type=int, default=0, metavar="B",
                   help="permutation resamples for the tests that use them; 0 keeps the default tests")
    p.add_argument("--seed", type=int, default=config.DEFAULT_SEED, metavar="S",
                   help="random seed; the same seed gives the same results on any number of workers")
    p.add_argument("--test", action="append", default=[], metavar="MEASURE=METHOD",
                   help="the p-value method of one measure (repeatable; default: each measure's default test), "
                        "e.g. pearson=t, pearson=permutation, dcor=permutation")
    p.add_argument("--ordered", nargs="?", const="", default=None, metavar="COL",
                   help="the rows are in time order (as in the file, or sorted by the numeric or date/time column "
                        "COL, which is then not analysed; rows without a time left out): tests allow for serial "
                        "dependence (default: rows independent)")
    p.add_argument("--difference", action="store_true",
                   help="analyse the first differences of every column in time order (for trending columns; "
                        "implies --ordered)")
    _add_kind_options(p)
    p.add_argument("--given", default=None, metavar="COL[,COL...]",
                   help="hold these columns fixed: adds partial Pearson, partial Spearman and partial distance "
                        "correlation given them (own q-value family); the given columns are not paired "
                        "(default: none)")
    p.add_argument("--workers", type=int, default=None, metavar="N", help="local worker processes (default: all cores)")
    p.add_argument("--cluster", default=None, metavar="ADDRESS",
                   help="Dask scheduler to run on, e.g. tcp://127.0.0.1:8786 (default: this machine)")


def _add_kind_options(p: argparse.ArgumentParser) -> None:
    p.add_argument("--categorical", metavar="LIST", default=None,
                   help="comma-separated columns to analyse as categorical (levels), e.g. numeric codes "
                        "(default: text columns with at most %d levels and whole-number class codes)"
                        % config.CATEGORICAL_MAX_LEVELS)
    p.add_argument("--numeric", metavar="LIST", default=None,
                   help="comma-separated columns detected as class codes to analyse as numbers instead "
                        "(default: none)")


def _measure_names() -> list[str]:
    # The registry imports NumPy; the top-level --help must not pay for it.
    from .core.registry import MEASURES

    return list(MEASURES)


def _subparser(sub, name: str, summary: str, description: str) -> argparse.ArgumentParser:
    return sub.add_parser(name, help=summary, description=description, formatter_class=_HelpFormatter)


def build_parser(command: str | None = None) -> argparse.ArgumentParser:
    """The argument parser; with ``command`` only that subcommand's options are built in full.

    Building every subcommand would import the measure registry (and NumPy) for
    ``pairlens --help``; a subcommand that is not run gets a bare parser.
    """
    parser = _Parser(prog="pairlens", formatter_class=_HelpFormatter,
                     description="Association analysis for every pair of columns: several measures, "
                                 "p-values that hold their level, q-values, a Gaussian fit per pair.",
                     epilog="Run 'pairlens COMMAND --help' for the options of a command. "
                            "The contracts of the command line are in docs/contracts.md.")
    parser.add_argument("--version", action="version", version=f"pairlens {__version__}",
                        help="print the version and exit")
    sub = parser.add_subparsers(dest="command", required=True, parser_class=_Parser, metavar="COMMAND")

    def full(name: str) -> bool:
        return command is None or command == name

    serve = _subparser(sub, "serve", "start the local dashboard",
                       "Start the local dashboard (bound to 127.0.0.1 unless --host says otherwise).")
    if full("serve"):
        serve.add_argument("--host", default=config.DEFAULT_HOST,
                           help="address to listen on; beyond loopback every request needs the access token")
        serve.add_argument("--port", type=int, default=None,
                           help=f"TCP port to listen on (default: PAIRLENS_PORT if set, else {config.DEFAULT_PORT})")
        serve.add_argument("--data-dir", default=None, metavar="DIR",
                           help="workspace folder for uploads and results (default: PAIRLENS_DATA_DIR, "
                                "else a per-user data folder)")
        serve.add_argument("--demo", action="store_true", help="open with the invented vineyard demo dataset")
        serve.add_argument("--max-upload-mb", type=int, default=config.MAX_UPLOAD_MB, metavar="N",
                           help="largest upload accepted, in megabytes")
        serve.add_argument("--cluster", default=None, metavar="ADDRESS",
                           help="Dask scheduler to run analyses on (default: local worker processes)")
        serve.add_argument("--require-token", action="store_true",
                           help="ask for the access token even on loopback (other users of this machine can "
                                "reach 127.0.0.1); always on when bound beyond loopback")

    pairs = _subparser(sub, "pairs", "the pair table for every pair of columns",
                       "The pair table: one row per pair per measure, as CSV or JSON.")
    if full("pairs"):
        _add_analysis_options(pairs)
        pairs.add_argument("-o", "--output", default=None, metavar="OUT.csv|OUT.json|OUT.jsonl|OUT.parquet",
                           help="write to this file, by its ending: CSV, a JSON array, JSON Lines or Parquet "
                                "(default: CSV on standard output); CSV, JSON Lines and Parquet are written in "
                                "chunks as they go")
        pairs.add_argument("--top", type=int, default=None, metavar="K",
                           help="only each measure's K rows of smallest q-value, most significant first; on the "
                                "matrix path the pairs are then taken in blocks, so any number of pairs fits")
        pairs.add_argument("--max-q", type=float, default=None, metavar="Q",
                           help="only rows with q-value at most Q (q-values are over all pairs either way)")
        pairs.add_argument("--path", choices=("auto", "matrix", "pairs"), default="auto",
                           help="matrix: Pearson and Spearman of all pairs by matrix products (other measures "
                                "pair by pair beside them); pairs: one pair at a time; auto: the matrix path "
                                "for wide tables when the settings allow it")

    inspect = _subparser(sub, "inspect", "everything about one pair",
                         "Every measure, the bivariate Gaussian fit and the verdict for one pair.")
    if full("inspect"):
        inspect.add_argument("data", metavar="DATA", help="table file: .csv .tsv .txt .csv.gz .xlsx .parquet")
        inspect.add_argument("--sheet", help="worksheet of an .xlsx file (default: the first)")
        inspect.add_argument("--x", required=True, metavar="COL",
                             help="name of the first column (the predictor for the asymmetric xi)")
        inspect.add_argument("--y", required=True, metavar="COL", help="name of the second column")
        inspect.add_argument("--json", action="store_true",
                             help="machine-readable output (shape in docs/contracts.md) instead of text")
        inspect.add_argument("--confidence", type=float, default=config.DEFAULT_CONFIDENCE, metavar="LEVEL",
                             help="confidence level of the intervals, at least 0.5 and below 1")
        inspect.add_argument("--permutations", type=int, default=0, metavar="B",
                             help="permutation resamples for the tests that use them; 0 keeps the default tests")
        inspect.add_argument("--seed", type=int, default=config.DEFAULT_SEED, metavar="S",
                             help="random seed of the tests that draw random numbers")
        inspect.add_argument("--ordered", nargs="?", const="", default=None, metavar="COL",
                             help="the rows are in time order (as in the file, or sorted by the numeric or date/time "
                                  "column COL, which is then not analysed; rows without a time left out): tests allow "
                                  "for serial dependence (default: rows independent)")
        inspect.add_argument("--difference", action="store_true",
                       help="analyse the first differences of every column in time order (for trending columns; "
                            "implies --ordered)")
        inspect.add_argument("--given", default=None, metavar="COL[,COL...]",
                             help="hold these columns fixed: adds the partial measures and the residual view "
                                  "(default: none)")
        inspect.add_argument("--test", action="append", default=[], metavar="MEASURE=METHOD",
                             help="the p-value method of one measure (repeatable; default: each measure's "
                                  "default test), e.g. pearson=t")
        _add_kind_options(inspect)

    report = _subparser(sub, "report", "a self-contained HTML report",
                        "One HTML file with the maps, the pair table and the methods; it opens offline.")
    if full("report"):
        _add_analysis_options(report)
        report.add_argument("-o", "--output", required=True, metavar="REPORT.html", help="the HTML file to write")
    return parser


def _load(args):
    from .ingest import load_table

    table = load_table(args.data, sheet=getattr(args, "sheet", None))
    if getattr(args, "ordered", None):
        from .ordering import with_time_column

        table = with_time_column(table, args.ordered)  # --ordered DATE: the times become the sort key
    args.table_notes = list(table.notes)  # said on stderr once the command has succeeded
    return table


def _settings(args, table=None):
    from .kinds import settle
    from .plan import AnalysisSettings

    settings = AnalysisSettings.from_options(
        measures=args.measures, columns=args.columns, groups=args.group, missing=args.missing,
        adjust=args.adjust, confidence=args.confidence, permutations=args.permutations, seed=args.seed,
        tests=args.test, ordered=args.ordered, difference=args.difference,
        categorical=args.categorical, numeric=args.numeric, given=args.given)
    return settle(table, settings) if table is not None else settings


def _serial_note(args, check, ordered: bool) -> None:
    """The serial-dependence check's sentence, said on stderr with the table's notes."""
    message = check.message(ordered) if check is not None else ""
    if message:
        args.table_notes = [*getattr(args, "table_notes", []), message]


class _ProgressBar:
    """A one-line bar on stderr, only when stderr is a terminal and the run is long."""

    def __init__(self) -> None:
        self.enabled = sys.stderr.isatty()
        self.started = time.monotonic()
        self.shown = False

    def __call__(self, fraction: float, seconds_left: float) -> None:
        if not self.enabled or time.monotonic() - self.started < 1.0:
            return
        width = 30
        filled = int(round(fraction * width))
        left = "" if not math.isfinite(seconds_left) else f" {seconds_left:5.0f} s left"
        sys.stderr.write(f"\r[{'#' * filled}{'.' * (width - filled)}] {fraction * 100:5.1f}%{left}")
        sys.stderr.flush()
        self.shown = True

    def finish(self) -> None:
        if self.shown:
            sys.stderr.write("\r" + " " * 60 + "\r")
            sys.stderr.flush()


def _run(args, table):
    from .engine import run_analysis

    settings = _settings(args, table)
    bar = _ProgressBar()
    try:
        result = run_analysis(table.data, table.columns, settings, workers=args.workers,
                              cluster=args.cluster, progress=bar, path=getattr(args, "path", "auto"),
                              streamed=getattr(args, "streamed", False), top=getattr(args, "top", None))
    finally:
        bar.finish()
    _serial_note(args, result.serial, settings.ordered is not None)
    return settings, result


def _write_text(path: str | None, text: str) -> None:
    if path is None:
        sys.stdout.write(text)
        return
    target = Path(path)
    tmp = target.with_name(target.name + ".partial")
    tmp.write_text(text, encoding="utf-8")
    os.replace(tmp, target)


def cmd_pairs(args) -> int:
    from .export import STREAM_FORMATS, pairs_to_json, select_rows, write_pairs_stream, _LongTable

    out = args.output
    suffix = Path(out).suffix.lower() if out else ".csv"
    if suffix not in (*STREAM_FORMATS, ".json"):
        raise UsageError(f"pairlens pairs: output {out!r} must end in .csv, .json, .jsonl or .parquet")
    if args.top is not None and args.top < 1:
        raise UsageError("pairlens pairs: --top must be a positive number of rows, e.g. --top 1000")
    if args.max_q is not None and not 0.0 <= args.max_q <= 1.0:
        raise UsageError("pairlens pairs: --max-q must lie between 0 and 1, e.g. --max-q 0.05")
    if suffix == ".parquet":
        try:
            import pyarrow  # noqa: F401
        except ImportError:
            raise UsageError("pairlens pairs: writing .parquet needs pyarrow (pip install pyarrow); "
                             "use .csv or .jsonl") from None
    table = _load(args)
    args.streamed = suffix in STREAM_FORMATS
    _, result = _run(args, table)
    if suffix == ".json":
        long = _LongTable(result)
        chosen = select_rows(long, args.top, args.max_q)
        records = result.records()
        _write_text(out, pairs_to_json([records[k] for k in chosen.tolist()]) + "\n")
        return 0
    fmt = STREAM_FORMATS[suffix]
    if out is None:
        write_pairs_stream(result, sys.stdout, fmt, top=args.top, max_q=args.max_q)
        return 0
    target = Path(out)
    tmp = target.with_name(target.name + ".partial")
    try:
        if fmt == "parquet":
            write_pairs_stream(result, str(tmp), fmt, top=args.top, max_q=args.max_q)
        else:
            with open(tmp, "w", encoding="utf-8", newline="") as fh:
                write_pairs_stream(result, fh, fmt, top=args.top, max_q=args.max_q)
        os.replace(tmp, target)
    finally:
        tmp.unlink(missing_ok=True)
    return 0


def cmd_inspect(args) -> int:
    from .pairs import pair_detail
    from .plan import AnalysisSettings
    from .core.registry import MEASURES

    table = _load(args)
    from .kinds import levels_of, settle

    settings = AnalysisSettings.from_options(measures=list(MEASURES), confidence=args.confidence,
                                             permutations=args.permutations, seed=args.seed, tests=args.test,
                                             ordered=args.ordered, difference=args.difference,
                                             categorical=args.categorical, numeric=args.numeric,
                                             given=args.given)
    settings = settle(table, settings)
    detail = pair_detail(table.data, table.columns, args.x, args.y, settings, levels=levels_of(table, settings))
    if detail.get("serial_note"):
        args.table_notes = [*getattr(args, "table_notes", []), detail["serial_note"]]
    if args.json:
        sys.stdout.write(json.dumps(detail, indent=1, ensure_ascii=False, allow_nan=False) + "\n")
    else:
        sys.stdout.write(format_detail(detail))
    return 0


def _fmt(v, digits: int = 4) -> str:
    return "-" if v is None else f"{v:.{digits}g}"


# Keys of the Gaussian-implied values that are not measures of the registry.
_IMPLIED_LABELS = {"mi": "mutual information"}


def format_detail(d: dict) -> str:
    """A readable text form of :func:`pairlens.engine.pair_detail`."""
    lines = [f"{d['x']}  vs  {d['y']}    (n = {d['n']} rows with both values)", ""]
    width = max([10] + [len(name) for name in d["measures"]])
    lines.append(f"{'measure':<{width}} {'estimate':>10} {'interval':>22} {'p-value':>10}  method / note")
    for name, m in d["measures"].items():
        interval = "" if m["ci_low"] is None else f"[{_fmt(m['ci_low'])}, {_fmt(m['ci_high'])}]"
        extra = m.get("note") or m.get("method") or ""
        lines.append(f"{name:<{width}} {_fmt(m['estimate']):>10} {interval:>22} {_fmt(m['p_value']):>10}  {extra}")
    if d.get("given"):
        lines.append(f"partial_*: given {'; '.join(d['given']['how'])}; {d['given']['n']} rows with every "
                     "given column present")
    if d.get("categorical"):
        lines += _format_categorical(d)
    else:
        lines += _format_gaussian(d)
    p = d["pattern"]
    lines += ["", f"Verdict: {p['label']}"]
    lines += [f"  - {r}" for r in p["reasons"]]
    lines += ["", "Association is not causation; check outliers and missing data before relying on this.", ""]
    return "\n".join(lines)


def _format_categorical(d: dict) -> list[str]:
    """Kinds, and the group table (numeric x categorical) or the contingency table (both categorical)."""
    c = d["categorical"]
    lines = ["", f"Kinds: {d['x']} {d['kinds'][0]}, {d['y']} {d['kinds'][1]}"]
    if c["view"] == "groups":
        lines.append(f"{c['value']} by {c['group']}: eta = {_fmt(c['eta'], 3)}, omega² = {_fmt(c['omega2'], 3)}, "
                     f"F({c['df'][0]}, {c['df'][1]}) = {_fmt(c['f'])}")
        lines.append(f"  {'level':<16} {'n':>6} {'mean':>10} {'sd':>10} {'median':>10}")
        for g in c["groups"]:
            lines.append(f"  {g['level'][:16]:<16} {g['n']:>6} {_fmt(g['mean']):>10} {_fmt(g['sd']):>10} "
                         f"{_fmt(g['median']):>10}")
        return lines
    lines.append(f"Counts (adjusted standardised residuals; |r| > 2 departs from independence), rows {d['x']}, "
                 f"columns {d['y']}")
    width = max(8, *(len(v[:14]) + 2 for v in c["y_levels"]))
    lines.append("  " + " " * 16 + "".join(f"{v[:14]:>{width + 8}}" for v in c["y_levels"]))
    for level, counts, res in zip(c["x_levels"], c["counts"], c["residuals"]):
        cells = "".join(f"{n:>{width}} ({_fmt(r, 2):>5})" for n, r in zip(counts, res))
        lines.append(f"  {level[:16]:<16}{cells}")
    return lines


def _format_gaussian(d: dict) -> list[str]:
    lines: list[str] = []
    g = d["gaussian"]
    lines += ["", "Bivariate Gaussian fit"]
    lines.append(f"  mean = ({_fmt(g['mean'][0])}, {_fmt(g['mean'][1])}), rho = {_fmt(g['rho'])}")
    c = g["conditional"]
    lines.append(f"  E[{d['y']} | {d['x']}] = {_fmt(c['intercept'])} + {_fmt(c['slope'])} * {d['x']}, "
                 f"residual sd {_fmt(c['residual_sd'])}")
    implied = ", ".join(f"{_IMPLIED_LABELS.get(k, k)} {_fmt(v, 3)}" for k, v in g["implied"].items())
    lines.append(f"  a Gaussian with this rho implies: {implied}")
    if "mi" in g["implied"]:
        lines.append("    (mutual information in nats, -1/2 ln(1 - rho^2); not estimated from the data)")
    nm = g["normality"]
    lines.append(f"  joint normality (Henze-Zirkler): statistic {_fmt(nm['statistic'])}, p = {_fmt(nm['p_value'])}")
    return lines


def cmd_report(args) -> int:
    from .report import build_report

    if not args.output.lower().endswith((".html", ".htm")):
        raise UsageError(f"pairlens report: output {args.output!r} must end in .html")
    table = _load(args)
    settings, result = _run(args, table)
    command = settings.reproduce_command(args.data, args.output)
    html = build_report(table, result, command=command)
    _write_text(args.output, html)
    return 0


def cmd_serve(args) -> int:
    from .web.server import serve

    port = args.port
    if port is None:
        try:
            port = config.default_port()
        except ValueError as exc:
            raise UsageError(f"pairlens serve: {exc}") from None
    return serve(host=args.host, port=port, data_dir=args.data_dir, demo=args.demo,
                 max_upload_mb=args.max_upload_mb, cluster=args.cluster, require_token=args.require_token)


COMMANDS = {"pairs": cmd_pairs, "inspect": cmd_inspect, "report": cmd_report, "serve": cmd_serve}


def main(argv: list[str] | None = None) -> int:
    from .errors import SettingsError

    argv = sys.argv[1:] if argv is None else list(argv)
    try:
        # Only the subcommand being run gets its full parser (see build_parser).
        command = next((a for a in argv if a in COMMANDS), "")
        if os.environ.get(config.PLUGINS_ENV):  # measures of the user's own, before any measure name is read
            from .plugins import PluginError, load_plugins
            try:
                load_plugins()
            except PluginError as exc:
                raise UsageError(f"pairlens: {exc}") from None
        args = build_parser(command).parse_args(argv)
        status = COMMANDS[args.command](args)
        for note in getattr(args, "table_notes", []):
            print(_one_line(f"pairlens: note: {note}"), file=sys.stderr)
        return status
    except SystemExit as exc:  # --help and --version
        return int(exc.code or 0)
    except (UsageError, SettingsError) as exc:
        print(_one_line(str(exc)), file=sys.stderr)
        return EXIT_BAD_INPUT
    except KeyboardInterrupt:
        print("pairlens: interrupted", file=sys.stderr)
        return 130
    except BrokenPipeError:
        return 0
    except Exception as exc:  # noqa: BLE001 - the user gets one line, developers a traceback on request
        if _is_ingest_error(exc):
            print(_one_line(str(exc)), file=sys.stderr)
            return EXIT_BAD_INPUT
        if os.environ.get("PAIRLENS_DEBUG"):
            raise
        print(_one_line(f"pairlens: internal error ({type(exc).__name__}: {exc}); "
                        "rerun with PAIRLENS_DEBUG=1 and report it"), file=sys.stderr)
        return EXIT_INTERNAL


def _is_ingest_error(exc: BaseException) -> bool:
    # The reader module imports NumPy; it is looked up only if a command loaded it,
    # since an IngestError cannot come from anywhere else.
    ingest = sys.modules.get(__package__ + ".ingest")
    return ingest is not None and isinstance(exc, ingest.IngestError)


def _one_line(text: str) -> str:
    return " ".join(text.split())


if __name__ == "__main__":
    sys.exit(main())
