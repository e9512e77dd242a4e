"""Ingest: every corpus file loads with the values and types it was written with, or is refused
with one line that names the file.

Expected values are those tests/corpus/make_corpus.py wrote (known by construction); summary
statistics are checked against the standard library's ``statistics`` module and hashes against
``hashlib``.  The corpus data are invented.
"""

from __future__ import annotations

import concurrent.futures
import gzip
import hashlib
import importlib.util
import os
import statistics
import subprocess
import sys
import time
import zlib
from pathlib import Path

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from pairlens import config
from pairlens.ingest import IngestError, Table, load_bytes, load_table

ROOT = Path(__file__).resolve().parents[1]
_spec = importlib.util.spec_from_file_location("pairlens_ingest_corpus", ROOT / "tests" / "corpus" / "make_corpus.py")
corpus = importlib.util.module_from_spec(_spec)
_spec.loader.exec_module(corpus)

# A hang guard (a reader stuck on a hostile file), not a speed goal: those live in benchmarks.
PER_FILE_SECONDS = 60.0


@pytest.fixture(scope="module")
def files(tmp_path_factory) -> dict[str, tuple[str, Path]]:
    return corpus.write_corpus(tmp_path_factory.mktemp("corpus"))


def load(files, name: str, **kwargs) -> Table:
    started = time.perf_counter()
    table = load_table(files[name][1], **kwargs)
    assert time.perf_counter() - started < PER_FILE_SECONDS
    assert table.name == name
    assert table.data.dtype == np.float64
    assert table.data.shape == (table.n_rows, len(table.columns))
    assert [c.name for c in table.info if c.used] == table.columns
    assert table.preview_header == [c.name for c in table.info]
    assert all(len(row) == len(table.info) for row in table.preview)
    assert len(table.preview) == min(20, table.n_rows)
    return table


def info(table: Table, name: str):
    return next(c for c in table.info if c.name == name)


def assert_blocks(table: Table) -> None:
    """The plain block table: three numeric columns and the text column 'block'."""
    # categorical columns within the level limit are kept too (issue 18); the numeric ones in file order
    numeric = [c for c in table.columns if info(table, c).kind == "numeric"]
    assert numeric == ["moisture_10cm", "moisture_30cm", "sugar"]
    np.testing.assert_array_equal(table.data[:, [table.columns.index(c) for c in numeric]],
                                  np.column_stack([corpus.MOISTURE_10, corpus.MOISTURE_30, corpus.SUGAR]))
    block = info(table, "block")
    assert (block.kind, block.used, block.reason) == ("text", False, "text column (6 distinct values)")
    assert table.preview[0][0] == "Nordhang"


# --- awkward but valid files -------------------------------------------------------------


def test_corpus_is_big_enough(files):
    verdicts = [v for v, _ in files.values()]
    assert len(files) >= 20
    assert verdicts.count(corpus.GOOD) >= 15 and verdicts.count(corpus.BAD) >= 15


@pytest.mark.parametrize("name, delimiter, encoding", [
    ("semicolon_dot.csv", ";", "UTF-8"),
    ("tabs.tsv", "\t", "UTF-8"),
    ("pipes.txt", "|", "UTF-8"),
    ("utf16le_bom.tsv", "\t", "UTF-16 LE with BOM"),
    ("utf16be_bom.csv", ",", "UTF-16 BE with BOM"),
])
def test_delimiters_and_encodings(files, name, delimiter, encoding):
    table = load(files, name)
    assert (table.delimiter, table.encoding, table.decimal) == (delimiter, encoding, ".")
    assert_blocks(table)


def test_semicolon_with_decimal_comma(files):
    table = load(files, "semicolon_decimal_comma.csv")
    assert (table.delimiter, table.decimal) == (";", ",")
    assert_blocks(table)
    assert any("decimal comma" in n for n in table.notes)
    assert table.preview[0][1] == "12,5"  # the preview shows the cell as written


def test_ambiguous_thousands_comma_is_not_taken_as_decimal():
    content = "a;b;c\n1,250;2,500;x\n3,750;4,125;y\n5,000;6,875;z\n".encode()
    with pytest.raises(IngestError, match="fewer than 2 numeric columns"):
        load_bytes(content, "thousands.csv")


def test_spaces_after_delimiters_and_quoted_cells():
    table = load_bytes(b'block, note, sugar, acidity\nA, "dry, windy", 18.1, 7.2\nB, "wet", 19.4, 6.8\n'
                       b'C, calm, 21.2, 6.1\n', "spaced.csv")
    assert table.columns == ["sugar", "acidity"]
    assert table.preview[0][:2] == ["A", "dry, windy"]
    np.testing.assert_array_equal(table.data, [[18.1, 7.2], [19.4, 6.8], [21.2, 6.1]])


def test_utf8_bom_and_non_ascii_names(files):
    table = load(files, "utf8_bom.csv")
    assert table.encoding == "UTF-8 with BOM"
    assert table.columns == ["Bodenfeuchte µ", "Temperatur °C", "Säure"]  # no BOM left in the first name
    np.testing.assert_array_equal(table.data[:, 2], corpus.ACIDITY)


def test_latin1(files):
    table = load(files, "latin1.csv")
    assert table.columns == ["température", "acidité"]
    assert table.preview[0][0] == "Côte 0"
    assert any("not valid UTF-8" in n for n in table.notes)
    np.testing.assert_array_equal(table.data, np.column_stack([corpus.SUGAR, corpus.ACIDITY]))


def test_bytes_outside_windows_1252_fall_back_to_latin1():
    # 0x81 is unassigned in Windows-1252 (Python's cp1252 codec table) but is a Latin-1 control
    table = load_bytes(b"a,b,c\n\x81x,1,2\nb,3,4\nc,5,6\n", "old.csv")
    assert table.encoding == "Latin-1" and table.columns == ["b", "c"]


@settings(max_examples=30, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(
    values=st.lists(st.lists(st.floats(-1e6, 1e6, allow_nan=False).map(lambda v: round(v, 2)),
                             min_size=3, max_size=3), min_size=3, max_size=30),
    delimiter=st.sampled_from([",", ";", "\t", "|"]),
    encoding=st.sampled_from(["utf-8", "utf-8-sig", "utf-16", "cp1252"]),
    decimal_comma=st.booleans(),
    crlf=st.booleans(),
)
def test_written_numbers_read_back_exactly(values, delimiter, encoding, decimal_comma, crlf):
    # Any delimiter, encoding and line ending: the numbers written are the numbers read.
    decimal_comma = decimal_comma and delimiter != ","
    # make at least one cell carry two decimals so a decimal comma is unambiguous
    values[0][0] = 0.25
    def cell(v: float) -> str:
        return repr(v).replace(".", ",") if decimal_comma else repr(v)
    newline = "\r\n" if crlf else "\n"
    text = newline.join([delimiter.join(["Säure", "x y", "z"])] + [delimiter.join(map(cell, row)) for row in values])
    table = load_bytes((text + newline).encode(encoding), "roundtrip.csv")
    assert table.delimiter == delimiter and table.decimal == ("," if decimal_comma else ".")
    assert table.columns == ["Säure", "x y", "z"]
    np.testing.assert_array_equal(table.data, np.array(values, dtype=np.float64))


def test_gzip_is_sniffed_after_decompression(files):
    table = load(files, "weekly.csv.gz")
    raw = files["weekly.csv.gz"][1].read_bytes()
    assert table.sha256 == hashlib.sha256(raw).hexdigest()  # of the compressed bytes, as stored
    assert table.sha256 != hashlib.sha256(gzip.decompress(raw)).hexdigest()
    assert (table.format, table.delimiter) == ("csv.gz", ";")
    expected = corpus.gzip_values()
    np.testing.assert_array_equal(table.data[:, 0], np.arange(1, 51))
    np.testing.assert_array_equal(table.data[:, 1:], expected)


def test_quoted_newlines_are_not_ragged(files):
    table = load(files, "quoted_newlines.csv")
    assert table.n_rows == 6
    assert table.columns == ["sugar", "acidity"]
    np.testing.assert_array_equal(table.data, np.column_stack([corpus.SUGAR, corpus.ACIDITY]))
    assert table.preview[0][1] == 'line one, with a comma\nline two "quoted"\nline three'


def test_duplicate_and_empty_names(files):
    table = load(files, "duplicate_names.csv")
    assert table.columns == ["depth", "depth (2)", "column 3", "depth (3)", "sugar"]
    assert [c.original for c in table.info] == ["depth", "depth", "", "depth", "sugar"]
    assert any("'depth' -> 'depth (2)'" in n for n in table.notes)
    assert any("column 3" in n for n in table.notes)
    np.testing.assert_array_equal(table.data[:, 3], 4 * np.arange(6))


def test_constant_column_stays_numeric_and_used(files):
    table = load(files, "constant_column.csv")
    slope = info(table, "slope_aspect")
    assert (slope.kind, slope.used, slope.distinct, slope.minimum, slope.maximum) == ("numeric", True, 1, 180, 180)
    assert table.columns == ["sugar", "slope_aspect", "acidity"]
    assert any("constant" in n and "slope_aspect" in n for n in table.notes)


def test_all_missing_columns_are_listed_not_used(files):
    table = load(files, "all_missing_column.csv")
    assert table.columns == ["sugar", "acidity"]
    for name in ("disease_score", "notes"):
        column = info(table, name)
        assert (column.kind, column.used, column.reason, column.missing) == ("empty", False, "all values missing", 6)
    assert dict(table.excluded) == {"disease_score": "all values missing", "notes": "all values missing"}


def test_infinities_count_as_missing(files):
    table = load(files, "inf_values.csv")
    ratio = info(table, "ratio")
    assert (ratio.kind, ratio.used, ratio.infinite, ratio.missing, ratio.distinct) == ("numeric", True, 3, 3, 3)
    column = table.data[:, table.columns.index("ratio")]
    assert np.isnan(column[[0, 2, 4]]).all() and not np.isinf(column).any()
    np.testing.assert_array_equal(column[[1, 3, 5]], [1.5, 2.5, 3.5])
    assert any("ratio" in n and "3 infinite values" in n for n in table.notes)


def test_mixed_text_columns_and_the_95_percent_rule(files):
    table = load(files, "mixed_text.csv")
    # categorical columns within the level limit are kept as level codes (issue 18)
    assert table.columns == ["variety", "score", "irrigated", "sugar"]
    score = info(table, "score")  # 39 of 40 cells are numbers: 97.5 % >= 95 %
    assert (score.kind, score.used, score.missing, score.non_numeric) == ("numeric", True, 1, 1)
    assert np.isnan(table.data[7, 1])
    assert any("'score'" in n and "1 non-numeric cell" in n and "n/a?" in n for n in table.notes)
    mostly = info(table, "mostly_text")  # 28 of 40: too few
    assert (mostly.kind, mostly.used) == ("text", False) and "28 of 40" in mostly.reason
    variety = info(table, "variety")
    assert (variety.kind, variety.used, variety.distinct) == ("categorical", True, 3)
    codes = table.data[:, 0]
    # level codes index the sorted level names (issue 18)
    assert set(np.unique(codes[~np.isnan(codes)])) <= {0.0, 1.0, 2.0} and len(variety.levels) == 3
    assert list(variety.levels) == sorted(variety.levels)
    assert info(table, "block").reason == "text column (40 distinct values)"
    irrigated = info(table, "irrigated")  # booleans are categories, not 0/1 numbers
    assert (irrigated.kind, irrigated.used) == ("categorical", True) and len(irrigated.levels) == 2
    # summary statistics of the used columns, checked against the statistics module
    sugar = [15 + i * 0.1 for i in range(40)]
    s = info(table, "sugar")
    assert (s.minimum, s.maximum, s.distinct, s.missing) == (min(sugar), max(sugar), 40, 0)
    assert s.median == pytest.approx(statistics.median(sugar), rel=1e-15)


@pytest.mark.parametrize("junk, numeric", [(1, True), (2, False)])
def test_numeric_share_boundary(junk, numeric):
    # 20 non-missing cells: 19 numbers is exactly 95 % (kept), 18 is 90 % (left out)
    cells = [str(i) for i in range(20 - junk)] + ["oops"] * junk
    text = "x,y\n" + "".join(f"{i},{c}\n" for i, c in enumerate(cells))
    if numeric:
        table = load_bytes(text.encode(), "share.csv")
        assert table.columns == ["x", "y"] and info(table, "y").non_numeric == junk
    else:
        with pytest.raises(IngestError, match="mixed column: only 18 of 20"):
            load_bytes(text.encode(), "share.csv")


def test_wide_file(files):
    started = time.perf_counter()
    table = load(files, "wide_4x3000.csv")
    elapsed = time.perf_counter() - started
    assert table.data.shape == corpus.WIDE_SHAPE
    np.testing.assert_array_equal(table.data, corpus.wide_values())
    assert table.columns[-1] == "sensor_2999"
    print(f"\n4 x 3000 wide file read in {elapsed:.2f} s")  # for the record; speed goals live in benchmarks


def test_xlsx_first_sheet_and_named_sheet(files):
    table = load(files, "blocks.xlsx")
    assert (table.format, table.sheet, table.sheets) == ("xlsx", "Blocks", ["Blocks", "Weekly", "Empty"])
    assert_blocks(table)
    assert info(table, "sampled").kind == "datetime"
    assert info(table, "irrigated").kind == "categorical"
    weekly = load(files, "blocks.xlsx", sheet="Weekly")
    assert weekly.sheet == "Weekly" and weekly.columns == ["week", "wetness_hours", "acidity"]
    np.testing.assert_array_equal(weekly.data[:, 2], corpus.ACIDITY)


def test_xlsx_unknown_sheet_lists_the_sheets(files):
    with pytest.raises(IngestError) as caught:
        load_table(files["blocks.xlsx"][1], sheet="Summary")
    message = str(caught.value)
    assert message.startswith("blocks.xlsx: ") and "\n" not in message
    assert "'Summary'" in message and "'Blocks', 'Weekly', 'Empty'" in message


def test_xlsx_sheet_name_in_the_wrong_case_gets_a_hint(files):
    with pytest.raises(IngestError, match=r"did you mean 'Weekly'\?"):
        load_table(files["blocks.xlsx"][1], sheet="weekly")


def test_xlsx_empty_sheet(files):
    with pytest.raises(IngestError, match=r"^blocks\.xlsx: empty file: sheet 'Empty'"):
        load_table(files["blocks.xlsx"][1], sheet="Empty")


def test_xlsx_title_row_and_error_cells(files):
    table = load(files, "titled.xlsx")
    assert table.columns == ["week", "berry_weight_g", "sugar_per_berry"]
    assert any("title row" in n and "Harvest 2026" in n for n in table.notes)
    np.testing.assert_array_equal(table.data[:, 0], np.arange(1, 26))
    per_berry = info(table, "sugar_per_berry")  # 24 of 25 numbers: 96 % >= 95 %
    assert (per_berry.non_numeric, per_berry.missing) == (1, 1) and np.isnan(table.data[4, 2])
    assert any("#DIV/0!" in n for n in table.notes)


def test_parquet(files):
    table = load(files, "blocks.parquet")
    # categorical columns within the level limit are kept too (issue 18), after these in file order
    assert [c for c in table.columns if info(table, c).kind == "numeric"] == ["week", "moisture_10cm", "sugar",
                                                                              "acidity_text"]
    assert table.columns[:3] == ["week", "moisture_10cm", "sugar"]
    moisture = table.data[:, 1]
    assert np.isnan(moisture[1]) and info(table, "moisture_10cm").missing == 1
    # float32 column: the stored float32 values, widened exactly
    np.testing.assert_array_equal(table.data[:, 2], np.asarray(corpus.SUGAR, dtype=np.float32).astype(np.float64))
    np.testing.assert_array_equal(table.data[:, table.columns.index("acidity_text")], corpus.ACIDITY)  # the text rule
    kinds = {c.name: c.kind for c in table.info if not c.used}
    # a Parquet boolean column is still left out (not yet read as levels); a text category is kept (issue 18)
    assert kinds == {"block": "text", "irrigated": "categorical", "sampled": "datetime"}
    assert (info(table, "variety").kind, info(table, "variety").used) == ("categorical", True)
    assert table.preview[0][3] == "18.1"


def test_datetime_columns(files):
    table = load(files, "datetime_column.csv")
    assert table.columns == ["sugar", "acidity"]
    for name in ("sampled", "time_of_day"):
        column = info(table, name)
        assert (column.kind, column.used, column.reason) == ("datetime", False, "datetime column")


def test_short_rows_trailing_delimiter_and_empty_rows(files):
    table = load(files, "short_rows_trailing_delimiter.csv")
    assert table.n_rows == 6  # the ",,,," row and the blank line are dropped
    assert table.columns == ["sugar", "acidity", "irrigation_min"]
    irrigation = table.data[:, 2]
    assert np.isnan(irrigation[2])  # the short row's missing cell
    np.testing.assert_array_equal(irrigation[[0, 1, 3, 4, 5]], [0, 10, 30, 40, 50])
    assert info(table, "column 5").kind == "empty"
    assert any("dropped 1 row" in n for n in table.notes)


def test_hundred_thousand_rows_round_trip(tmp_path):
    values = np.random.default_rng(3).normal(size=(100_000, 20))
    path = tmp_path / "long.csv"
    np.savetxt(path, values, delimiter=",", fmt="%.17g", header=",".join(f"v{j}" for j in range(20)), comments="")
    started = time.perf_counter()
    table = load_table(path)
    elapsed = time.perf_counter() - started
    np.testing.assert_array_equal(table.data, values)  # %.17g text round-trips a float64 exactly
    v0 = info(table, "v0")
    assert v0.median == statistics.median(values[:, 0].tolist())
    print(f"\n100,000 x 20 read in {elapsed:.2f} s")  # for the record; speed goals live in benchmarks


def test_load_bytes_matches_load_table_and_uses_base_name(files):
    path = files["tabs.tsv"][1]
    table = load_bytes(path.read_bytes(), "C:\\Users\\someone\\exports/tabs.tsv")
    assert table.name == "tabs.tsv"
    assert table.sha256 == hashlib.sha256(path.read_bytes()).hexdigest() == load_table(path).sha256
    np.testing.assert_array_equal(table.data, load_table(path).data)
    with pytest.raises(IngestError, match=r"^empty\.csv: "):
        load_bytes(b"", "/home/someone/private/empty.csv")


# --- files that must be refused ------------------------------------------------------------

BAD_EXPECTED = {
    "empty.csv": "empty file",
    "blank_lines.csv": "empty file",
    "header_only.csv": "header only",
    "two_rows.csv": "fewer than 3 data rows: it has only 2",
    "one_numeric.csv": "fewer than 2 numeric columns: found 1 numeric column ('sugar')",
    "ragged.csv": "ragged rows: line 8 has 4 fields but the header has 3",
    "png_named.csv": "binary or not a table: the content is a PNG image",
    "elf_named.csv": "binary or not a table: the content is a program",
    "zip_named.csv": "binary or not a table: the content is a ZIP archive",
    "tables.zip": "archive: extract the table first",
    "tables.tar.gz": "archive: extract the table first",
    "tables.7z": "archive: extract the table first",
    "table.json": "unsupported format: '.json' files are not read (supported: .csv, .tsv, .txt, .csv.gz, .xlsx, .parquet)",
    "bad_utf16.csv": "unreadable encoding",
    "corrupt.xlsx": "corrupt xlsx",
    "text_named.xlsx": "is not an Excel workbook: the content is text",
    "corrupt.parquet": "corrupt parquet",
    "truncated.csv.gz": "corrupt gzip",
    "not_gzip.csv.gz": "is not gzip-compressed",
    "unclosed_quote.csv": "never closed",
    "space_delimited.txt": "check the delimiter",
    "web_page.csv": "binary or not a table: the content is a web page",
}


def test_every_bad_file_has_an_expectation(files):
    assert {n for n, (v, _) in files.items() if v == corpus.BAD} == set(BAD_EXPECTED)


@pytest.mark.parametrize("name", sorted(BAD_EXPECTED))
def test_bad_file_is_refused_on_one_line(files, name):
    started = time.perf_counter()
    with pytest.raises(IngestError) as caught:  # any other exception type fails the test
        load_table(files[name][1])
    assert time.perf_counter() - started < PER_FILE_SECONDS
    message = str(caught.value)
    assert message.startswith(f"{name}: ")
    assert "\n" not in message and "\r" not in message
    assert BAD_EXPECTED[name] in message
    assert "; " in message  # problem; fix


def test_missing_file_and_directory(tmp_path):
    with pytest.raises(IngestError, match=r"^nowhere\.csv: file not found"):
        load_table(tmp_path / "nowhere.csv")
    folder = tmp_path / "folder.csv"
    folder.mkdir()
    with pytest.raises(IngestError, match=r"^folder\.csv: "):
        load_table(folder)


@pytest.mark.parametrize("name", ["blocks.xlsx", "blocks.parquet", "tabs.tsv"])
def test_row_and_column_limits(files, monkeypatch, name):
    monkeypatch.setattr(config, "MAX_ROWS", 5)
    with pytest.raises(IngestError, match=r"rows; pairlens reads at most 5|at most 5;"):
        load_table(files[name][1])
    monkeypatch.setattr(config, "MAX_ROWS", 1000)
    monkeypatch.setattr(config, "MAX_COLUMNS", 3)
    with pytest.raises(IngestError, match=r"columns; pairlens reads at most 3"):
        load_table(files[name][1])


def test_unexpected_parser_failure_becomes_ingest_error(files, monkeypatch):
    import pandas

    from pairlens import ingest

    monkeypatch.setattr(ingest, "_FAST_NUMERIC_READER", False)  # this checks the general reader

    def broken(*args, **kwargs):
        raise RuntimeError("parser exploded\nsecond line")

    monkeypatch.setattr(pandas, "read_csv", broken)
    with pytest.raises(IngestError) as caught:
        load_table(files["tabs.tsv"][1])
    message = str(caught.value)
    assert message.startswith("tabs.tsv: could not be read (RuntimeError: parser exploded second line)")
    assert "\n" not in message


def test_wrong_argument_type_is_an_ingest_error():
    with pytest.raises(IngestError, match="expected the file's bytes"):
        load_bytes("a,b\n1,2\n", "text.csv")  # type: ignore[arg-type]


def test_random_bytes_never_escape_as_other_errors():
    # a cheap fuzz: damaged variants of valid files must give a Table or an IngestError
    rng = np.random.default_rng(11)
    sources = corpus.corpus()
    seeds = [sources[n][1] for n in ("quoted_newlines.csv", "utf16le_bom.tsv", "blocks.xlsx",
                                     "blocks.parquet", "weekly.csv.gz", "semicolon_decimal_comma.csv")]
    names = ["f.csv", "f.tsv", "f.xlsx", "f.parquet", "f.csv.gz", "f.txt"]
    for content, name in zip(seeds, names):
        for _ in range(25):
            damaged = bytearray(content)
            for position in rng.integers(0, len(damaged), size=rng.integers(1, 8)):
                damaged[position] = int(rng.integers(0, 256))
            if rng.random() < 0.3:
                damaged = damaged[: int(rng.integers(1, len(damaged)))]
            try:
                result = load_bytes(bytes(damaged), name)
            except IngestError as exc:
                assert "\n" not in str(exc) and str(exc).startswith(name + ": ")
            else:
                assert isinstance(result, Table) and result.data.dtype == np.float64


# --- the command line: exit 2, one stderr line, no traceback ---------------------------------



def _run_cli(args: list[str]) -> subprocess.CompletedProcess:
    env = {k: v for k, v in os.environ.items() if k != "PAIRLENS_DEBUG"}
    env["PYTHONPATH"] = str(ROOT) + os.pathsep + env.get("PYTHONPATH", "")
    return subprocess.run([sys.executable, "-m", "pairlens.cli", *args], cwd=ROOT, env=env,
                          capture_output=True, text=True, timeout=PER_FILE_SECONDS)


def _check_refusal(name: str, returncode: int, stderr: str, stdout: str) -> list[str]:
    problems = []
    lines = stderr.splitlines()
    if returncode != 2:
        problems.append(f"{name}: exit {returncode}")
    if len(lines) != 1 or not lines[0].strip():
        problems.append(f"{name}: stderr has {len(lines)} lines: {stderr[:300]!r}")
    elif name not in lines[0]:
        problems.append(f"{name}: stderr does not name the file: {lines[0]!r}")
    if "Traceback" in stderr or "Traceback" in stdout:
        problems.append(f"{name}: traceback printed")
    return problems


def _refusal_runs(files) -> list[tuple[str, list[str]]]:
    runs = [(name, ["pairs", str(files[name][1])]) for name in sorted(BAD_EXPECTED)]
    runs.append(("blocks.xlsx", ["pairs", str(files["blocks.xlsx"][1]), "--sheet", "Summary"]))
    return runs


def test_cli_refuses_every_bad_file_with_one_line(files, capsys, monkeypatch):
    # The command's entry point, in this process, for every bad file (the interpreter start-up of
    # a subprocess per file adds nothing the next test does not check).
    from pairlens import cli

    monkeypatch.delenv("PAIRLENS_DEBUG", raising=False)
    problems = []
    for name, args in _refusal_runs(files):
        capsys.readouterr()
        returncode = cli.main(args)
        out = capsys.readouterr()
        problems += _check_refusal(name, returncode, out.err, out.out)
    assert not problems, problems


def test_cli_process_refuses_bad_files_with_one_line(files):
    # Whole processes, as a user runs them: exit status, stderr and no traceback from the interpreter.
    runs = [run for run in _refusal_runs(files) if run[0] in ("blocks.xlsx", sorted(BAD_EXPECTED)[0])]
    with concurrent.futures.ThreadPoolExecutor(max_workers=2) as pool:
        results = list(pool.map(lambda run: (run[0], _run_cli(run[1])), runs))
    problems = []
    for name, done in results:
        problems += _check_refusal(name, done.returncode, done.stderr, done.stdout)
    assert len(results) == 2 and not problems, problems


# --- the plain-numbers reader against the general reader (the oracle) ----------------------

def _load_outcome(content: bytes, name: str, fast: bool, monkeypatch) -> tuple:
    """Everything a load gives, comparable with ==: the table's fields, or the error line."""
    from pairlens import ingest

    monkeypatch.setattr(ingest, "_FAST_NUMERIC_READER", fast)
    try:
        table = load_bytes(content, name)
    except IngestError as exc:
        return ("refused", str(exc))
    def plain(value):
        return "NaN" if isinstance(value, float) and value != value else value
    return ("table", table.name, table.sha256, table.n_rows, table.columns, table.data.tobytes(),
            [tuple(plain(v) for v in vars(c).values()) for c in table.info], table.notes, table.preview,
            table.preview_header, table.format, table.encoding, table.delimiter, table.decimal)


def test_plain_numbers_reader_is_taken_for_a_plain_numeric_file(monkeypatch):
    # the speed path must really run (and import no pandas) on the files it is meant for
    import sys

    from pairlens import ingest

    calls = []
    original = ingest._read_plain_numbers
    monkeypatch.setattr(ingest, "_read_plain_numbers", lambda *a: calls.append(1) or original(*a))
    table = load_bytes(b"a,b,c\n1,2.5,NA\n2,,3e2\n3,4,5\n-1,0.125,7\n", "plain.csv")
    assert calls and table.columns == ["a", "b", "c"]
    np.testing.assert_array_equal(table.data, [[1, 2.5, np.nan], [2, np.nan, 300], [3, 4, 5], [-1, 0.125, 7]])
    script = ("import sys; from pairlens.ingest import load_bytes; "
              "load_bytes(b'a,b\\n1,2\\n3,4\\n5,7\\n', 'p.csv'); print('pandas' in sys.modules)")
    done = subprocess.run([sys.executable, "-c", script], cwd=ROOT, capture_output=True, text=True, timeout=60)
    assert done.stdout.strip() == "False", done.stderr


def test_plain_numbers_reader_agrees_with_the_general_reader_on_the_corpus(files, monkeypatch):
    for name, (_, path) in sorted(files.items()):
        content = path.read_bytes()
        assert _load_outcome(content, name, True, monkeypatch) == _load_outcome(content, name, False,
                                                                                 monkeypatch), name


# cells a numeric-looking file may hold, the awkward ones included; the general reader decides
_CELLS = ["1", "-2", "+3", "0.5", ".5", "5.", "1e5", "1E-5", "2.5e+3", "-0", "007", "1e400", "1e-400",
          "9007199254740993", "123456789012345678901234567890", "inf", "-inf", "Infinity", "+inf", "NaN",
          "nan", "NAN", "NA", "", "null", "NULL", "None", "N/A", "#N/A", "-nan", " 1.5", "1.5 ", '"2.5"',
          '" 3"', '""', "abc", "TRUE", "0x1A", "1_000", "1,5", "2024-01-05", "\u00a07"]


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(
    cells=st.lists(st.lists(st.one_of(st.sampled_from(_CELLS),
                                      st.floats(allow_nan=False, width=64).map(repr)),
                            min_size=3, max_size=3), min_size=1, max_size=12),
    plain_share=st.sampled_from([0.0, 0.9, 1.0]),
    delimiter=st.sampled_from([",", ";", "\t", "|"]),
    newline=st.sampled_from(["\n", "\r\n"]),
    blank_rows=st.booleans(),
    short_row=st.booleans(),
)
def test_plain_numbers_reader_agrees_with_the_general_reader(cells, plain_share, delimiter, newline,
                                                            blank_rows, short_row, monkeypatch):
    # mostly plain numbers, so that the speed path is really taken in many examples
    rows = [[c if (zlib.crc32(f"{i},{j},{c}".encode()) % 10) / 10 >= plain_share else repr(float(i * 3 + j) / 4)
             for j, c in enumerate(row)] for i, row in enumerate(cells)]
    lines = [delimiter.join(["x", "y", "z"])] + [delimiter.join(r) for r in rows]
    if blank_rows:
        lines.insert(2, delimiter * 2)
        lines.append("")
    if short_row:
        lines.append(delimiter.join(["4", "5"]))
    content = (newline.join(lines) + newline).encode("utf-8")
    assert _load_outcome(content, "cells.csv", True, monkeypatch) == _load_outcome(content, "cells.csv", False,
                                                                                   monkeypatch)
