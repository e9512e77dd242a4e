"""Write the ingest test corpus: awkward but valid tables and files that must be refused.

The values are invented (a made-up cooperative of hillside vineyards); nothing here is
measured data.  Run ``python tests/corpus/make_corpus.py DIR`` to look at the files; the
tests call :func:`write_corpus` into a temporary directory.
"""

from __future__ import annotations

import gzip
import io
import sys
import tarfile
import zipfile
from datetime import datetime, timedelta
from pathlib import Path

import numpy as np

# Invented vineyard blocks: block, soil moisture at 10 and 30 cm, sugar (deg Brix), acidity (g/l).
BLOCKS = ["Nordhang", "Südhang", "Kuppe", "Senke", "Terrasse", "Mulde"]
MOISTURE_10 = [12.5, 14.25, 9.75, 18.0, 11.5, 16.125]
MOISTURE_30 = [20.25, 22.5, 17.0, 25.75, 19.5, 24.0]
SUGAR = [18.1, 19.4, 21.2, 16.8, 20.3, 17.5]
ACIDITY = [7.2, 6.8, 6.1, 8.0, 6.5, 7.6]

WIDE_SHAPE = (4, 3000)
GOOD = "good"
BAD = "bad"


def wide_values() -> np.ndarray:
    """The 4 x 3000 block of the wide file (seeded, so tests can compare exactly)."""
    return np.random.default_rng(20261201).normal(10.0, 2.0, size=WIDE_SHAPE).round(6)


def gzip_values() -> np.ndarray:
    """Weekly leaf-wetness hours and canopy temperature for the gzip file (seeded)."""
    rng = np.random.default_rng(7)
    return np.column_stack([rng.integers(0, 60, 50), rng.normal(24.0, 3.0, 50).round(3)])


def _lines(rows, delimiter=",", newline="\n") -> str:
    return newline.join(delimiter.join(str(c) for c in row) for row in rows) + newline


def _decimal_comma(x: float) -> str:
    return repr(x).replace(".", ",")


def _xlsx_bytes() -> bytes:
    import openpyxl

    book = openpyxl.Workbook()
    sheet = book.active
    sheet.title = "Blocks"
    sheet.append(["block", "moisture_10cm", "moisture_30cm", "sugar", "sampled", "irrigated"])
    start = datetime(2026, 9, 1, 8, 30)
    for i, block in enumerate(BLOCKS):
        sheet.append([block, MOISTURE_10[i], MOISTURE_30[i], SUGAR[i], start + timedelta(days=i), i % 2 == 0])
    weekly = book.create_sheet("Weekly")
    weekly.append(["week", "wetness_hours", "acidity"])
    for i, acidity in enumerate(ACIDITY):
        weekly.append([i + 1, 10 * i + 3, acidity])
    book.create_sheet("Empty")
    out = io.BytesIO()
    book.save(out)
    return out.getvalue()


def _titled_xlsx_bytes() -> bytes:
    """A title line above the header and an Excel error value among the numbers."""
    import openpyxl

    book = openpyxl.Workbook()
    sheet = book.active
    sheet.title = "Harvest"
    sheet.append(["Harvest 2026, invented vineyard blocks"])
    sheet.append([])
    sheet.append(["week", "berry_weight_g", "sugar_per_berry"])
    for week in range(1, 26):
        sheet.append([week, 1.0 + week / 10, "#DIV/0!" if week == 5 else round(0.2 * week, 3)])
    out = io.BytesIO()
    book.save(out)
    return out.getvalue()


def _parquet_bytes() -> bytes:
    import pyarrow as pa
    import pyarrow.parquet as pq

    table = pa.table({
        "block": pa.array(BLOCKS),
        "week": pa.array([1, 2, 3, 4, 5, 6], type=pa.int64()),
        "moisture_10cm": pa.array([MOISTURE_10[0], None] + MOISTURE_10[2:], type=pa.float64()),
        "sugar": pa.array(SUGAR, type=pa.float32()),
        "irrigated": pa.array([True, False, True, None, False, True]),
        "sampled": pa.array([datetime(2026, 9, 1) + timedelta(days=i) for i in range(6)],
                            type=pa.timestamp("ms")),
        "variety": pa.array(["Riesling", "Silvaner", "Riesling", "Kerner", "Riesling", "Silvaner"]
                            ).dictionary_encode(),
        "acidity_text": pa.array([repr(a) for a in ACIDITY]),
    })
    out = io.BytesIO()
    pq.write_table(table, out)
    return out.getvalue()


def corpus() -> dict[str, tuple[str, bytes]]:
    """File name -> (GOOD or BAD, bytes)."""
    files: dict[str, tuple[str, bytes]] = {}

    def good(name: str, content: bytes | str, encoding: str = "utf-8") -> None:
        files[name] = (GOOD, content.encode(encoding) if isinstance(content, str) else content)

    def bad(name: str, content: bytes | str) -> None:
        files[name] = (BAD, content.encode("utf-8") if isinstance(content, str) else content)

    rows = [["block", "moisture_10cm", "moisture_30cm", "sugar"]]
    rows += [[b, MOISTURE_10[i], MOISTURE_30[i], SUGAR[i]] for i, b in enumerate(BLOCKS)]
    plain = _lines(rows)

    # --- awkward but valid -------------------------------------------------------------
    semi = [rows[0]] + [[r[0]] + [_decimal_comma(v) for v in r[1:]] for r in rows[1:]]
    good("semicolon_decimal_comma.csv", _lines(semi, ";", "\r\n"))
    good("semicolon_dot.csv", _lines(rows, ";"))
    good("utf8_bom.csv", "\ufeff" + _lines([["Bodenfeuchte µ", "Temperatur °C", "Säure"]]
                                            + [[MOISTURE_10[i], SUGAR[i], ACIDITY[i]] for i in range(6)]))
    good("utf16le_bom.tsv", "\ufeff" + _lines(rows, "\t", "\r\n"), "utf-16-le")
    good("utf16be_bom.csv", "\ufeff" + _lines(rows), "utf-16-be")
    good("latin1.csv", _lines([["parcelle", "température", "acidité"]]
                              + [[f"Côte {i}", SUGAR[i], ACIDITY[i]] for i in range(6)]), "latin-1")
    good("tabs.tsv", _lines(rows, "\t"))
    good("pipes.txt", _lines(rows, "|"))
    gz = gzip_values()
    gz_text = _lines([["week", "wetness_hours", "canopy_temp"]] + [[i + 1, int(a), repr(float(b))] for i, (a, b) in enumerate(gz)], ";")
    good("weekly.csv.gz", gzip.compress(gz_text.encode(), mtime=0))
    quoted = ['block,comment,sugar,acidity']
    for i, b in enumerate(BLOCKS):
        quoted.append(f'{b},"line one, with a comma\nline two ""quoted""\nline three",{SUGAR[i]},{ACIDITY[i]}')
    good("quoted_newlines.csv", "\r\n".join(quoted) + "\r\n")
    dup = [["depth", "depth", "", "depth", "sugar"]] + [[i, i * 2, i * 3, i * 4, SUGAR[i]] for i in range(6)]
    good("duplicate_names.csv", _lines(dup))
    good("constant_column.csv", _lines([["sugar", "slope_aspect", "acidity"]]
                                       + [[SUGAR[i], 180, ACIDITY[i]] for i in range(6)]))
    good("all_missing_column.csv", _lines([["sugar", "disease_score", "acidity", "notes"]]
                                          + [[SUGAR[i], "" if i % 2 else "NA", ACIDITY[i], ""] for i in range(6)]))
    infs = ["inf", "1.5", "-inf", "2.5", "Infinity", "3.5"]
    good("inf_values.csv", _lines([["sugar", "ratio", "acidity"]] + [[SUGAR[i], infs[i], ACIDITY[i]] for i in range(6)]))
    mixed = [["block", "variety", "score", "mostly_text", "irrigated", "sugar"]]
    varieties = ["Riesling", "Silvaner", "Kerner"]
    for i in range(40):
        score = "n/a?" if i == 7 else f"{i * 0.5:.1f}"
        mostly = f"{i}" if i % 10 < 7 else f"see log {i}"
        mixed.append([f"block {i}", varieties[i % 3], score, mostly, "TRUE" if i % 2 else "FALSE", 15 + i * 0.1])
    good("mixed_text.csv", _lines(mixed))
    wide = wide_values()
    good("wide_4x3000.csv", _lines([[f"sensor_{j}" for j in range(WIDE_SHAPE[1])]]
                                   + [[repr(float(v)) for v in row] for row in wide]))
    good("blocks.xlsx", _xlsx_bytes())
    good("titled.xlsx", _titled_xlsx_bytes())
    good("blocks.parquet", _parquet_bytes())
    dates = [["sampled", "sugar", "acidity", "time_of_day"]]
    for i in range(6):
        dates.append([f"2026-09-{i + 1:02d}T08:30:00", SUGAR[i], ACIDITY[i], f"{8 + i}:15"])
    good("datetime_column.csv", _lines(dates))
    short = "block,sugar,acidity,irrigation_min,\n" + "".join(
        f"{b},{SUGAR[i]},{ACIDITY[i]}" + (f",{10 * i}," if i != 2 else "") + "\n" for i, b in enumerate(BLOCKS))
    good("short_rows_trailing_delimiter.csv", short + ",,,,\n\n")

    # --- must be refused ------------------------------------------------------------
    bad("empty.csv", b"")
    bad("blank_lines.csv", "\n  \n\r\n")
    bad("header_only.csv", "block,sugar,acidity\n")
    bad("two_rows.csv", "block,sugar,acidity\nA,18.1,7.2\nB,19.4,6.8\n")
    bad("one_numeric.csv", _lines([["block", "sugar", "variety"]] + [[b, SUGAR[i], "Riesling"] for i, b in enumerate(BLOCKS)]))
    ragged = ('block,comment,sugar\n'
              'A,"two\nlines",18.1\n'
              'B,plain,19.4\n'
              'C,"three\nquoted\nlines",21.2\n'
              'D,oops,16.8,extra\n'
              'E,fine,20.3\n')
    bad("ragged.csv", ragged)  # the long row starts on physical line 8
    bad("png_named.csv", b"\x89PNG\r\n\x1a\n\x00\x00\x00\rIHDR" + bytes(64))
    bad("elf_named.csv", b"\x7fELF\x02\x01\x01\x00" + bytes(120))
    zipped = io.BytesIO()
    with zipfile.ZipFile(zipped, "w") as zf:
        zf.writestr("blocks.csv", plain)
    bad("zip_named.csv", zipped.getvalue())
    bad("tables.zip", zipped.getvalue())
    tarred = io.BytesIO()
    with tarfile.open(fileobj=tarred, mode="w:gz") as tf:
        info = tarfile.TarInfo("blocks.csv")
        data = plain.encode()
        info.size = len(data)
        tf.addfile(info, io.BytesIO(data))
    bad("tables.tar.gz", tarred.getvalue())
    bad("tables.7z", b"7z\xbc\xaf\x27\x1c\x00\x04" + bytes(40))
    bad("table.json", '{"block": ["A", "B"]}')
    bad("bad_utf16.csv", b"\xff\xfe" + "a,b\n1,2\n".encode("utf-16-le") + b"\x00\xdc" + "3,4\n".encode("utf-16-le"))
    xlsx = _xlsx_bytes()
    bad("corrupt.xlsx", xlsx[: len(xlsx) // 2])
    bad("text_named.xlsx", plain)
    bad("corrupt.parquet", b"PAR1" + bytes(range(256)) * 4 + b"PAR1")
    gzipped = gzip.compress(plain.encode() * 20, mtime=0)
    bad("truncated.csv.gz", gzipped[: len(gzipped) // 2])
    bad("not_gzip.csv.gz", plain)
    bad("unclosed_quote.csv", 'block,sugar,acidity\nA,18.1,7.2\nB,"19.4,6.8\nC,21.2,6.1\n')
    bad("space_delimited.txt", "block sugar acidity\nA 18.1 7.2\nB 19.4 6.8\nC 21.2 6.1\n")
    bad("web_page.csv", "<!DOCTYPE html>\n<html><body>Sign in to download</body></html>\n")
    return files


def write_corpus(directory: str | Path) -> dict[str, tuple[str, Path]]:
    """Write every corpus file into ``directory``; file name -> (GOOD or BAD, path)."""
    directory = Path(directory)
    directory.mkdir(parents=True, exist_ok=True)
    written = {}
    for name, (verdict, content) in corpus().items():
        path = directory / name
        path.write_bytes(content)
        written[name] = (verdict, path)
    return written


if __name__ == "__main__":
    target = Path(sys.argv[1] if len(sys.argv) > 1 else "corpus_files")
    for name, (verdict, path) in sorted(write_corpus(target).items()):
        print(f"{verdict:4} {path}")
