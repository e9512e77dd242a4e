"""Bytes or a path in, a typed table out; one error type whose message a user can act on.

Formats: .csv .tsv .txt (delimiter and encoding sniffed), .csv.gz (also .tsv.gz, .txt.gz),
.xlsx (first sheet unless ``sheet`` names another) and .parquet.  The extension picks the
reader and the leading bytes must agree with it, so a renamed image, archive or program is
refused with a message instead of being parsed as garbage.

Rules a user can rely on (also stated in the README):

* Encoding: a byte-order mark wins (UTF-8, UTF-16 LE/BE, UTF-32); without one, UTF-16 is
  recognised by its zero bytes, then strict UTF-8 is tried, then Windows-1252, then Latin-1
  (which accepts any byte sequence).  A file whose byte-order mark promises an encoding its
  bytes break is refused as unreadable.
* Delimiter: whichever of comma, semicolon, tab and pipe splits the header and the first
  rows into the same number of fields (at least two); ties go to that order.
* Decimal comma: only in files delimited by semicolon, tab or pipe, and only when the first
  rows hold numbers like ``3,14`` and none like ``3.14``.  When every such number has exactly
  three digits after the comma (``1,250``) the comma might be a thousands separator, so it is
  left alone and those columns stay text.
* A column is numeric when at least ``config.NUMERIC_MIN_SHARE`` (95 %) of its non-missing
  cells are numbers; the other cells become missing and a note names how many.  Missing
  cells are empty ones and the usual markers (NA, N/A, NaN, null, None, #N/A, ...).
* +inf and -inf are counted as missing, with a note per column.
* True/false columns are categorical, never 0/1 numbers (a column of 0 and 1 is numeric).
* Constant columns stay numeric and used; the measures report them as undefined.
* Everything else is listed in ``Table.info`` with ``used=False`` and a plain reason.
* A row with more fields than the header is an error naming its line (one trailing empty
  field, from a delimiter at the end of the line, is tolerated).  A row with fewer fields
  than the header has its last cells missing.  Rows with every cell empty are dropped.
  Spaces after a delimiter are ignored, so ``a, "b, c"`` is two cells.
* Workbooks: the first non-empty row is the header, except that a lone text cell above a
  row of names is skipped as a title (with a note).  Formula cells give the value Excel
  cached when it saved the file; a workbook written by a program that caches nothing has
  those cells missing.
* Categorical or text: at most 50 distinct values and at most half as many distinct values as
  filled cells is "categorical", anything else "text" (left out). A categorical column with at
  most ``config.CATEGORICAL_MAX_LEVELS`` levels is kept: ``Table.data`` holds its level codes
  0..k-1 (levels sorted as text, ``ColumnInfo.levels``); with more it is left out with the fix.  Cells that all
  look like dates or times (ISO 8601, 31.05.2024, 5/31/24, 31 May 2024, 12:30) make a
  datetime column, also left out.
"""

from __future__ import annotations

import csv
import gzip
import hashlib
import io
import itertools
import os
import re
import threading
import warnings
import zipfile
import zlib
from dataclasses import dataclass, field
from datetime import date, datetime, time
from pathlib import Path

import numpy as np

from . import config
from .core.verdict import class_code_levels

__all__ = ["IngestError", "ColumnInfo", "Table", "load_table", "load_bytes", "load_file_isolated",
           "read_file_bytes", "SUPPORTED_FORMATS"]

SUPPORTED_FORMATS = ".csv, .tsv, .txt, .csv.gz, .xlsx, .parquet"


class IngestError(ValueError):
    """A file pairlens cannot use. ``str(err)`` is one line naming the file, the problem and a fix."""


@dataclass(frozen=True)
class ColumnInfo:
    name: str            # unique name used everywhere in pairlens
    original: str        # name as written in the file
    kind: str            # "numeric" | "categorical" | "text" | "datetime" | "empty"
    used: bool           # feeds the measures
    reason: str          # why it was left out ("" when used)
    missing: int         # missing cells (inf counted as missing for numeric)
    infinite: int        # +/-inf cells turned into missing
    distinct: int
    minimum: float = float("nan")
    median: float = float("nan")
    maximum: float = float("nan")
    non_numeric: int = 0  # cells of a numeric column that were not numbers (now missing)
    levels: tuple[str, ...] = ()  # a categorical column's levels; its cells in Table.data are their codes 0..k-1


@dataclass
class Table:
    name: str                     # file name as given (display only, never a path)
    sha256: str                   # of the file's bytes
    n_rows: int
    columns: list[str]            # numeric columns used, unique names, file order
    data: np.ndarray              # (n_rows, len(columns)) float64, NaN = missing
    info: list[ColumnInfo]        # every column of the file, in file order
    notes: list[str] = field(default_factory=list)   # e.g. renamed duplicates, inf counted missing
    preview: list[list[str]] = field(default_factory=list)  # first rows, all columns, as text
    preview_header: list[str] = field(default_factory=list)
    format: str = ""              # "csv" | "csv.gz" | "xlsx" | "parquet"
    encoding: str = ""            # text formats: the encoding the bytes were read with
    delimiter: str = ""           # text formats: the field delimiter found
    decimal: str = "."            # text formats: "," when a decimal comma was detected
    sheet: str = ""               # xlsx: the sheet read
    sheets: list[str] = field(default_factory=list)  # xlsx: every sheet in the workbook
    # datetime columns (left out of the analysis): seconds since 1970-01-01 UTC per row, NaN where
    # missing or unreadable; --ordered COL sorts the rows by one of them (app/ordering.py)
    times: dict[str, np.ndarray] = field(default_factory=dict)

    def levels(self, name: str) -> tuple[str, ...]:
        """The level names of a categorical text column (its codes index them), () otherwise."""
        for c in self.info:
            if c.name == name:
                return c.levels
        return ()

    @property
    def excluded(self) -> list[tuple[str, str]]:
        return [(c.name, c.reason) for c in self.info if not c.used]


# ---------------------------------------------------------------------------
# private helpers
# ---------------------------------------------------------------------------

_TEXT_EXTENSIONS = (".csv", ".tsv", ".txt")
_GZIP_EXTENSIONS = (".csv.gz", ".tsv.gz", ".txt.gz")
_ARCHIVE_EXTENSIONS = (".tar.gz", ".tgz", ".tar.bz2", ".tbz2", ".tar.xz", ".txz", ".tar.zst",
                       ".tar", ".zip", ".7z", ".rar")
_OTHER_HINTS = {
    ".xls": "old Excel .xls workbooks are not read; save it as .xlsx or .csv",
    ".xlsm": "save the workbook as .xlsx (without macros) or as .csv",
    ".ods": "save the spreadsheet as .xlsx or .csv",
    ".json": "save the table as .csv",
    ".feather": "save the table as .parquet or .csv",
    ".gz": "only gzip-compressed text tables (.csv.gz) are read",
}

# Missing-value markers, the same list pandas uses by default, applied to every format so a
# workbook cell "NA" means what a CSV cell "NA" means.
_PANDAS_NA_VALUES = (
    "", "#N/A", "#N/A N/A", "#NA", "-1.#IND", "-1.#QNAN", "-NaN", "-nan", "1.#IND", "1.#QNAN",
    "<NA>", "N/A", "NA", "NULL", "NaN", "None", "n/a", "nan", "null")
_NA_TOKENS = frozenset(s.lower() for s in _PANDAS_NA_VALUES)
_BOOL_TOKENS = frozenset(("true", "false", "yes", "no", "t", "f", "y", "n"))

_TIME = r"\d{1,2}:\d{2}(?::\d{2}(?:[.,]\d+)?)?(?:\s?[AaPp][Mm])?"
_TZ = r"(?:\s?(?:Z|UTC|[+-]\d{2}:?\d{2}))?"
_DATETIME_RE = "|".join((
    rf"\d{{4}}-\d{{1,2}}-\d{{1,2}}(?:[T ]{_TIME})?{_TZ}",          # 2024-05-31 12:00
    rf"\d{{4}}/\d{{1,2}}/\d{{1,2}}(?:[T ]{_TIME})?{_TZ}",          # 2024/05/31
    r"\d{4}-\d{2}",                                                # 2024-05
    rf"\d{{1,2}}[/.-]\d{{1,2}}[/.-]\d{{2,4}}(?:[T ]{_TIME})?{_TZ}",  # 31.05.2024, 5/31/24
    rf"\d{{1,2}}[ -][A-Za-z]{{3,9}}\.?[ -]\d{{2,4}}(?: {_TIME})?",   # 31 May 2024
    rf"[A-Za-z]{{3,9}}\.? \d{{1,2}},? \d{{4}}(?: {_TIME})?",         # May 31, 2024
    _TIME + _TZ,                                                    # 12:30:05
))
_COMMA_DECIMAL_RE = re.compile(r"[+-]?\d*,(\d+)(?:[eE][+-]?\d+)?")
_DOT_DECIMAL_RE = re.compile(r"[+-]?(?:\d+\.\d*|\.\d+)(?:[eE][+-]?\d+)?")
_NUMBER_RE = re.compile(r"[+-]?(?:\d+[.,]?\d*|[.,]\d+)(?:[eE][+-]?\d+)?")

_CONTROL_RE = re.compile(r"[\x00-\x08\x0e-\x1f\x7f]")  # below 32 except \t \n \v \f \r, and DEL
_LEADING_SPACE_RE = re.compile(r"\s*")
_SNIFF_CHARS = 1 << 16
_HEAD_PREFIX_CHARS = 1 << 20
_SNIFF_RECORDS = 200
_PREVIEW_ROWS = 20
_CATEGORICAL_MAX_DISTINCT = 50
_FIELD_SIZE_LIMIT = 2**31 - 1


def _one_line(text: str) -> str:
    return " ".join(str(text).split())


def _fail(file: str, problem: str, fix: str = "") -> IngestError:
    message = f"{file}: {problem}"
    if fix:
        message += f"; {fix}"
    return IngestError(_one_line(message))


def _display_name(name: str | Path | None) -> str:
    text = str(name or "")
    base = re.split(r"[\\/]", text)[-1]
    base = _one_line("".join(ch if ch.isprintable() else " " for ch in base))
    return base or "uploaded file"


def _quote(value: object, limit: int = 40) -> str:
    text = _one_line(value)
    if len(text) > limit:
        text = text[: limit - 3] + "..."
    return repr(text)


def _name_list(names: list[str], limit: int = 6) -> str:
    shown = ", ".join(_quote(n) for n in names[:limit])
    if len(names) > limit:
        shown += f" and {len(names) - limit} more"
    return shown


def _plural(count: int, word: str, plural: str | None = None) -> str:
    return f"{count} {word if count == 1 else (plural or word + 's')}"


def _format_from_name(base: str) -> str:
    lower = base.lower()
    for ext in _ARCHIVE_EXTENSIONS:
        if lower.endswith(ext):
            raise _fail(base, f"is an archive ({ext})",
                        "archive: extract the table first and load the .csv, .xlsx or .parquet file inside")
    if lower.endswith(_GZIP_EXTENSIONS):
        return "csv.gz"
    if lower.endswith(_TEXT_EXTENSIONS):
        return "csv"
    if lower.endswith(".xlsx"):
        return "xlsx"
    if lower.endswith(".parquet") or lower.endswith(".pq"):
        return "parquet"
    ext = "." + lower.rsplit(".", 1)[-1] if "." in lower else ""
    hint = _OTHER_HINTS.get(ext, "save the table in one of those formats")
    what = f"'{ext}' files" if ext else "files without an extension"
    raise _fail(base, f"unsupported format: {what} are not read (supported: {SUPPORTED_FORMATS})", hint)


def _zip_kind(content: bytes) -> str:
    try:
        with zipfile.ZipFile(io.BytesIO(content)) as zf:
            names = zf.namelist()
    except Exception:  # noqa: BLE001 - a damaged directory (bad version, bad name bytes) is still "a zip"
        return "zip"
    if "xl/workbook.xml" in names:
        return "xlsx"
    if any(n.startswith("content.xml") for n in names) and "mimetype" in names:
        return "ods"
    return "zip"


def _magic(content: bytes) -> str | None:
    """Name of a known binary format from the leading bytes, or None for anything else."""
    head = content[:16]
    if head.startswith((b"PK\x03\x04", b"PK\x05\x06", b"PK\x07\x08")):
        return _zip_kind(content)
    table = (
        (b"\x1f\x8b", "gzip"), (b"7z\xbc\xaf\x27\x1c", "7z"), (b"Rar!\x1a\x07", "rar"),
        (b"\xfd7zXZ\x00", "xz"), (b"(\xb5/\xfd", "zstd"), (b"\x89PNG\r\n\x1a\n", "png"),
        (b"\xff\xd8\xff", "jpeg"), (b"GIF87a", "gif"), (b"GIF89a", "gif"), (b"%PDF-", "pdf"),
        (b"\x7fELF", "elf"), (b"\xd0\xcf\x11\xe0\xa1\xb1\x1a\xe1", "ole2"), (b"PAR1", "parquet"),
        (b"SQLite format 3\x00", "sqlite"), (b"\xca\xfe\xba\xbe", "mach-o"),
        (b"\xcf\xfa\xed\xfe", "mach-o"), (b"\x89HDF\r\n\x1a\n", "hdf5"),
    )
    for prefix, kind in table:
        if head.startswith(prefix):
            return kind
    if re.match(rb"BZh[1-9]1AY&SY", head):
        return "bzip2"
    if content[257:262] == b"ustar":
        return "tar"
    if head.startswith(b"MZ") and b"\x00" in content[:64]:
        return "exe"
    return None


_MAGIC_WORDS = {
    "zip": "a ZIP archive", "xlsx": "an Excel workbook", "ods": "an OpenDocument spreadsheet",
    "gzip": "gzip-compressed", "7z": "a 7-Zip archive", "rar": "a RAR archive",
    "xz": "xz-compressed", "zstd": "zstd-compressed", "bzip2": "bzip2-compressed",
    "tar": "a tar archive", "png": "a PNG image", "jpeg": "a JPEG image", "gif": "a GIF image",
    "pdf": "a PDF document", "elf": "a program (ELF executable)", "exe": "a Windows program",
    "ole2": "an old Office file (.xls/.doc)", "parquet": "a Parquet file",
    "sqlite": "an SQLite database", "mach-o": "a program (Mach-O)", "hdf5": "an HDF5 file",
}
_ARCHIVE_KINDS = {"zip", "7z", "rar", "tar", "xz", "zstd", "bzip2"}


def _refuse_binary(base: str, kind: str, stem: str) -> IngestError:
    what = _MAGIC_WORDS.get(kind, "binary data")
    if kind == "xlsx":
        fix = f"rename it to {stem}.xlsx"
    elif kind == "parquet":
        fix = f"rename it to {stem}.parquet"
    elif kind == "gzip":
        fix = f"rename it to {stem}.csv.gz"
    elif kind in _ARCHIVE_KINDS:
        fix = "archive: extract the table first and load the file inside"
    elif kind == "ole2":
        fix = "save it from Excel as .xlsx or .csv"
    else:
        fix = "choose the .csv, .xlsx or .parquet file that holds the table"
    return _fail(base, f"binary or not a table: the content is {what}, not a text table", fix)


def _stem(base: str) -> str:
    lower = base.lower()
    for ext in _GZIP_EXTENSIONS + _TEXT_EXTENSIONS + (".xlsx", ".parquet", ".pq"):
        if lower.endswith(ext):
            return base[: len(base) - len(ext)] or "data"
    return base


def _raise_hint(setting: str, env: str) -> str:
    return f"load a sample, or raise the limit ({setting} in app/config.py, or the {env} environment variable)"


def _head_width(head: bytes) -> int:
    """Fields in the first line of a text table's first bytes (1 when it cannot tell)."""
    try:
        text, _ = _decode(head, "head", [])
    except Exception:  # noqa: BLE001 - only an estimate; the full reader explains bad files
        return 1
    text = text.lstrip()
    if not text:
        return 1
    delimiter = _sniff_delimiter(text)
    try:
        first = next(iter(_records(text, delimiter)), None)
    except csv.Error:
        first = None
    if first is None:
        return max(1, len(text.split("\n", 1)[0].split(delimiter)))
    return max(1, len(first[1]))


def _line_count(chunk: bytes) -> int:
    return max(chunk.count(b"\n"), chunk.count(b"\r"))


def _check_text_size(base: str, lines: int, width: int, size: int) -> None:
    """Refuse a text table whose size, line count (a bound on its rows) or cells pass a limit."""
    text_limit = int(config.MAX_DECOMPRESSED_MB) * 1024 * 1024
    if size > text_limit:
        raise _fail(base, f"holds more than {config.MAX_DECOMPRESSED_MB} MB of text (the limit for a table's text)",
                    _raise_hint("MAX_DECOMPRESSED_MB", "PAIRLENS_MAX_TEXT_MB"))
    if lines - 1 > config.MAX_ROWS:
        raise _fail(base, f"has more than {config.MAX_ROWS} lines below its header; pairlens reads at most {config.MAX_ROWS}",
                    _raise_hint("MAX_ROWS", "PAIRLENS_MAX_ROWS"))
    if width > config.MAX_COLUMNS:
        raise _fail(base, f"has {width} columns; pairlens reads at most {config.MAX_COLUMNS}",
                    "keep fewer columns (config.MAX_COLUMNS)")
    if (lines - 1) * width > config.MAX_CELLS:
        raise _fail(base, f"has more than {config.MAX_CELLS} cells (about {lines - 1} rows x {width} columns); "
                          f"pairlens reads at most {config.MAX_CELLS} cells from one file",
                    _raise_hint("MAX_CELLS", "PAIRLENS_MAX_CELLS"))


def _gunzip(content: bytes, base: str) -> bytes:
    """Inflate a .csv.gz in chunks, counting bytes and lines, so a bomb stops at the first limit it passes."""
    chunk_size = 1 << 20
    chunks: list[bytes] = []
    size = lines = 0
    width = 0
    try:
        with gzip.GzipFile(fileobj=io.BytesIO(content)) as gz:
            while True:
                chunk = gz.read(chunk_size)
                if not chunk:
                    break
                chunks.append(chunk)
                size += len(chunk)
                lines += _line_count(chunk)
                if not width and (size >= _SNIFF_CHARS or lines > _SNIFF_RECORDS):
                    width = _head_width(b"".join(chunks)[:_SNIFF_CHARS])
                _check_text_size(base, lines, max(width, 1), size)
    except (OSError, EOFError, zlib.error) as exc:
        raise _fail(base, f"corrupt gzip data ({_one_line(exc) or 'truncated'})",
                    "compress the file again, or load the uncompressed .csv") from exc
    raw = b"".join(chunks)
    chunks.clear()
    _check_text_size(base, _line_count(raw) + (0 if raw.endswith((b"\n", b"\r")) else 1),
                     _head_width(raw[:_SNIFF_CHARS]), len(raw))
    return raw


def _looks_like_text(content: bytes) -> bool:
    head = content[:2048]
    if b"\x00" in head:
        return False
    try:
        text = head.decode("utf-8")
    except UnicodeDecodeError as exc:
        if exc.start < len(head) - 4:  # a multibyte character cut at the end is fine
            return False
        text = head[: exc.start].decode("utf-8")
    return bool(text.strip()) and _control_share(text) == 0.0


def _control_share(text: str) -> float:
    sample = text[:_SNIFF_CHARS]
    if not sample:
        return 0.0
    return len(_CONTROL_RE.findall(sample)) / len(sample)


def _utf16_without_bom(raw: bytes) -> str | None:
    sample = raw[:4096]
    half = len(sample) // 2
    if half < 2:
        return None
    even_zero = sample[0::2].count(0)
    odd_zero = sample[1::2].count(0)
    if odd_zero > 0.4 * half and even_zero < 0.05 * half:
        return "utf-16-le"
    if even_zero > 0.4 * half and odd_zero < 0.05 * half:
        return "utf-16-be"
    return None


def _decode(raw: bytes, base: str, notes: list[str]) -> tuple[str, str]:
    boms = (
        (b"\xef\xbb\xbf", "utf-8", "UTF-8"),
        (b"\xff\xfe\x00\x00", "utf-32-le", "UTF-32 LE"),
        (b"\x00\x00\xfe\xff", "utf-32-be", "UTF-32 BE"),
        (b"\xff\xfe", "utf-16-le", "UTF-16 LE"),
        (b"\xfe\xff", "utf-16-be", "UTF-16 BE"),
    )
    for bom, codec, label in boms:
        if raw.startswith(bom):
            try:
                text = raw[len(bom):].decode(codec)
            except UnicodeDecodeError as exc:
                raise _fail(base, f"unreadable encoding: it starts with a {label} byte-order mark "
                                  f"but byte {exc.start + len(bom)} is not valid {label}",
                            "save the file again as UTF-8") from exc
            return text, (label + " with BOM")
    if b"\x00" in raw[:4096]:
        codec = _utf16_without_bom(raw)
        if codec is None:
            raise _fail(base, "binary or not a table: the content has zero (NUL) bytes, so it is not a text table",
                        "choose the .csv, .xlsx or .parquet file that holds the table")
        try:
            text = raw.decode(codec)
        except UnicodeDecodeError as exc:
            raise _fail(base, f"unreadable encoding: it looks like {codec.upper()} without a "
                              f"byte-order mark but byte {exc.start} is not valid",
                        "save the file again as UTF-8") from exc
        label = codec.upper().replace("-LE", " LE").replace("-BE", " BE")
        notes.append(f"read as {label} (no byte-order mark)")
        return text, label
    try:
        return raw.decode("utf-8"), "UTF-8"
    except UnicodeDecodeError:
        pass
    try:
        text = raw.decode("cp1252")
        label = "Windows-1252"
    except UnicodeDecodeError:
        text = raw.decode("latin-1")
        label = "Latin-1"
    notes.append(f"not valid UTF-8; read as {label}")
    return text, label


def _records(text: str, delimiter: str):
    """csv records with the physical line each starts on; blank lines skipped."""
    for start, _end, record in _records_with_end(text, delimiter):
        yield start, record


def _records_with_end(text: str, delimiter: str):
    reader = csv.reader(io.StringIO(text, newline=""), delimiter=delimiter, skipinitialspace=True)
    previous = 0
    for record in reader:
        start = previous + 1
        previous = reader.line_num
        if record and any(cell.strip() for cell in record):
            yield start, previous, record


def _head_records(text: str, delimiter: str, count: int) -> list:
    """The first ``count`` records of :func:`_records_with_end`, read from a prefix when it holds them.

    A csv reader over the whole text copies all of it; the head of a large file
    is in its first megabyte. The prefix ends at a line break, and its result is
    used only when a further record follows the last one kept, so that one is whole.
    """
    if len(text) > _HEAD_PREFIX_CHARS:
        cut = text.rfind("\n", 0, _HEAD_PREFIX_CHARS)
        if cut > 0:
            try:
                records = list(itertools.islice(_records_with_end(text[:cut + 1], delimiter), count + 1))
            except csv.Error:
                records = []
            if len(records) > count:
                return records[:count]
    return list(itertools.islice(_records_with_end(text, delimiter), count))


def _sniff_delimiter(text: str) -> str:
    sample = text[:_SNIFF_CHARS]
    if len(text) > _SNIFF_CHARS and "\n" in sample:
        sample = sample[: sample.rfind("\n")]
    best, best_score = ",", (0.0, 0)
    for delimiter in (",", ";", "\t", "|"):
        try:
            counts = [len(r) for _, r in itertools.islice(_records(sample, delimiter), _SNIFF_RECORDS)]
        except csv.Error:
            continue
        if not counts or counts[0] < 2:
            continue
        width = counts[0]
        agree = sum(1 for c in counts if c == width or c == width + 1) / len(counts)
        score = (round(agree, 6), width)
        if score > best_score:
            best, best_score = delimiter, score
    return best


def _detect_decimal_comma(rows: list[list[str]], delimiter: str) -> bool:
    if delimiter == ",":
        return False
    comma_digits: list[int] = []
    dot_numbers = 0
    for row in rows:
        for cell in row:
            cell = cell.strip()
            if not cell:
                continue
            m = _COMMA_DECIMAL_RE.fullmatch(cell)
            if m:
                comma_digits.append(len(m.group(1)))
            elif _DOT_DECIMAL_RE.fullmatch(cell):
                dot_numbers += 1
    if not comma_digits or dot_numbers:
        return False
    # every "1,250" alone could be a thousands separator: refuse to guess
    return any(d != 3 for d in comma_digits)


def _find_long_row(text: str, delimiter: str, width: int) -> tuple[int, int] | None:
    """(line, fields) of the first data record with more fields than the header."""
    records = _records(text, delimiter)
    next(records, None)
    for line, record in records:
        if len(record) > width + 1 or (len(record) == width + 1 and record[-1].strip()):
            return line, len(record)
    return None


def _last_record_line(text: str, delimiter: str) -> int:
    line = 0
    try:
        for line, _ in _records(text, delimiter):
            pass
    except csv.Error:
        pass
    return line


def _ragged_fix(width: int) -> str:
    fix = "fix that line: quote cells that contain the delimiter, or add the missing column names"
    if width == 1:
        fix += "; if a title or comment line sits above the header, delete it"
    return fix


def _delimiter_word(delimiter: str) -> str:
    return {",": "comma", ";": "semicolon", "\t": "tab", "|": "pipe"}.get(delimiter, repr(delimiter))


# The plain-numbers reader below is a speed path only: switched off, every file
# takes the general reader, which tests/test_ingest.py uses as its oracle.
_FAST_NUMERIC_READER = True


def _read_plain_numbers(body: str, delimiter: str, width: int) -> list[np.ndarray] | None:
    """Every column of a table whose cells are all numbers or missing-value markers, or None.

    Importing pandas costs a third of a second, several times what pyarrow takes to read a
    10,000 x 60 file. The reader is strict: any cell that is not a plain number or one of
    pandas' missing-value markers, a row with fewer or more cells than the header, a
    quoted line break, a space before a number, makes pyarrow raise, and the caller then
    takes the general reader. Both parse numbers correctly rounded, so the values agree.
    """
    try:
        import pyarrow as pa
        import pyarrow.csv as pa_csv

        names = [f"c{i}" for i in range(width)]
        parsed = pa_csv.read_csv(
            pa.BufferReader(body.encode("utf-8")),
            # no parsing threads: the engine later forks workers from this process, better
            # with as few threads alive as possible (threads would gain ~20 ms here)
            read_options=pa_csv.ReadOptions(column_names=names, use_threads=False),
            parse_options=pa_csv.ParseOptions(delimiter=delimiter, quote_char='"', double_quote=True,
                                              escape_char=False, newlines_in_values=False,
                                              ignore_empty_lines=True),
            convert_options=pa_csv.ConvertOptions(column_types={n: pa.float64() for n in names},
                                                  null_values=list(_PANDAS_NA_VALUES),
                                                  strings_can_be_null=True, quoted_strings_can_be_null=True),
        )
    except Exception:  # noqa: BLE001 - anything unusual is the general reader's to explain
        return None
    columns = []
    for chunked in parsed.columns:
        values = np.full(parsed.num_rows, np.nan)
        filled = 0
        for chunk in chunked.chunks:
            size = len(chunk)
            part = _float_chunk(chunk)
            if int(np.isnan(part).sum()) != chunk.null_count:
                # a written NaN ("NAN", "+nan") that is not a missing-value marker: whether the
                # general reader counts its row as empty depends on the column's other cells
                return None
            values[filled:filled + size] = part
            filled += size
        columns.append(values)
    if any(np.nanmax(np.abs(c), initial=0.0) >= 9e18 for c in columns) and re.search(r"\d{19}", body):
        # an integer past the 64-bit range makes the general reader keep the column as text
        # (then numbers again, but with other missing-cell rules); leave such files to it
        return None
    return columns


def _float_chunk(chunk) -> np.ndarray:
    """A float64 Arrow array as NumPy, NaN where null (Arrow's own to_numpy imports pandas for nulls)."""
    validity, data = chunk.buffers()[:2]
    size, offset = len(chunk), chunk.offset
    values = np.frombuffer(data, dtype=np.float64, count=size, offset=offset * 8).copy()
    if validity is not None and chunk.null_count:
        bits = np.unpackbits(np.frombuffer(validity, dtype=np.uint8), bitorder="little")
        values[~bits[offset:offset + size].astype(bool)] = np.nan
    return values


def _read_text_table(text: str, base: str, notes: list[str]):
    first = _LEADING_SPACE_RE.match(text).end()
    if first == len(text):
        raise _fail(base, "empty file: it holds no table", "choose the file that holds the table")
    if text[first:first + 15].lower().startswith(("<!doctype html", "<html")):
        raise _fail(base, "binary or not a table: the content is a web page (HTML), not a table",
                    "download the table itself (.csv, .xlsx or .parquet)")
    if _control_share(text) > 0.01:
        raise _fail(base, "binary or not a table: the content is mostly control characters",
                    "choose the .csv, .xlsx or .parquet file that holds the table")

    # one long quoted cell (a pasted log) must not trip the csv module's 128 KiB default
    if csv.field_size_limit() < _FIELD_SIZE_LIMIT:
        csv.field_size_limit(_FIELD_SIZE_LIMIT)
    delimiter = _sniff_delimiter(text)
    try:
        head = _head_records(text, delimiter, _SNIFF_RECORDS + 1)
    except csv.Error as exc:
        raise _fail(base, f"cannot split the first lines into fields ({_one_line(exc)})",
                    "check the quotes in the header and first rows") from exc
    if not head:
        raise _fail(base, "empty file: it holds no table", "choose the file that holds the table")
    header = head[0][2]
    header_end = head[0][1]
    body_start = 0
    for match in itertools.islice(re.finditer(r"\r\n|\r|\n", text), header_end):
        body_start = match.end()
    width = len(header)
    if width > config.MAX_COLUMNS:
        raise _fail(base, f"has {width} columns; pairlens reads at most {config.MAX_COLUMNS}",
                    "keep fewer columns (config.MAX_COLUMNS)")
    sample_rows = [r for _, _, r in head[1:]]
    if not sample_rows:
        raise _fail(base, "header only: the file has column names but no data rows",
                    "add data rows below the header")
    decimal_comma = _detect_decimal_comma(sample_rows, delimiter)
    if decimal_comma:
        notes.append("decimal comma detected: numbers like 3,14 read as 3.14")
    if width >= 2 and all(_NUMBER_RE.fullmatch(h.strip()) for h in header):
        notes.append("the first row is all numbers but was read as column names; "
                     "add a header row if it is data")

    preview = [(r + [""] * width)[:width] for r in sample_rows[:_PREVIEW_ROWS]]
    if _FAST_NUMERIC_READER and not decimal_comma:
        plain = _read_plain_numbers(text[body_start:], delimiter, width)
        if plain is not None and len(plain[0]) > 0:
            return header, plain, preview, delimiter, decimal_comma

    import pandas as pd

    names = [f"c{i}" for i in range(width)] + ["__beyond_header__"]
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            frame = pd.read_csv(
                io.StringIO(text[body_start:]), sep=delimiter, header=None, names=names, index_col=False,
                nrows=config.MAX_ROWS + 1, decimal="," if decimal_comma else ".",
                float_precision="round_trip", low_memory=False, skip_blank_lines=True,
                skipinitialspace=True,  # so `a, "b, c"` is two cells, as a reader of the file means
            )
    except pd.errors.ParserError as exc:
        message = _one_line(exc)
        long_row = _find_long_row(text, delimiter, width)
        if long_row:
            line, fields = long_row
            raise _fail(base, f"ragged rows: line {line} has {fields} fields but the header has {width} "
                              f"({_delimiter_word(delimiter)}-delimited)", _ragged_fix(width)) from exc
        if "EOF inside string" in message or "EOF" in message:
            line = _last_record_line(text, delimiter)
            raise _fail(base, f"a quoted cell starting near line {line} is never closed",
                        "add the closing double quote") from exc
        raise _fail(base, f"cannot be parsed as a {_delimiter_word(delimiter)}-delimited table ({message})",
                    "check the quotes and delimiters near that line") from exc

    beyond = frame.pop("__beyond_header__")
    if _is_text_dtype(beyond.dtype):
        beyond = beyond.where(~_cell_missing(beyond))
    if beyond.notna().any():
        long_row = _find_long_row(text, delimiter, width)
        if long_row:
            line, fields = long_row
            where = f"line {line} has {fields} fields"
        else:
            where = f"data row {int(np.flatnonzero(beyond.notna().to_numpy())[0]) + 1} has extra fields"
        raise _fail(base, f"ragged rows: {where} but the header has {width} "
                          f"({_delimiter_word(delimiter)}-delimited)", _ragged_fix(width))

    columns = [frame[c] for c in names[:-1]]
    return header, columns, preview, delimiter, decimal_comma


def _cell_text(value: object) -> str:
    if value is None:
        return ""
    if isinstance(value, bool):
        return "TRUE" if value else "FALSE"
    if isinstance(value, float):
        return "" if value != value else repr(value)
    if isinstance(value, datetime):
        return value.isoformat(sep=" ")
    if isinstance(value, (date, time)):
        return value.isoformat()
    if isinstance(value, (bytes, bytearray)):
        return value.hex()
    return str(value)


def _used_width(row) -> int:
    for j in range(len(row) - 1, -1, -1):
        v = row[j]
        if v is not None and not (isinstance(v, str) and not v.strip()):
            return j + 1
    return 0


def _xlsx_too_many_cells(base: str, sheet: str, count: str) -> IngestError:
    return _fail(base, f"sheet {sheet!r} has {count} cells; pairlens reads at most {config.MAX_XLSX_CELLS} "
                       "cells from a workbook (workbooks parse slowly)",
                 "save the table as .csv or .parquet, or raise the limit (MAX_XLSX_CELLS in app/config.py, "
                 "or the PAIRLENS_MAX_XLSX_CELLS environment variable)")


def _check_sheet_dimension(base: str, sheet: str, worksheet) -> None:
    """Refuse a sheet by the dimension its XML declares, before a single row is parsed."""
    try:
        rows, cols = int(worksheet.max_row or 0), int(worksheet.max_column or 0)
    except Exception:  # noqa: BLE001 - no or unreadable dimension: the running count guards instead
        return
    if cols > config.MAX_COLUMNS:
        raise _fail(base, f"sheet {sheet!r} declares {cols} columns; pairlens reads at most {config.MAX_COLUMNS}",
                    "keep fewer columns (config.MAX_COLUMNS)")
    if rows - 1 > config.MAX_ROWS:
        raise _fail(base, f"sheet {sheet!r} declares {rows} rows; pairlens reads at most {config.MAX_ROWS}",
                    _raise_hint("MAX_ROWS", "PAIRLENS_MAX_ROWS"))
    if rows * cols > config.MAX_XLSX_CELLS:
        raise _xlsx_too_many_cells(base, sheet, f"{rows * cols} ({rows} rows x {cols} columns)")


def _read_xlsx(content: bytes, base: str, sheet: str | None, notes: list[str]):
    import openpyxl

    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            book = openpyxl.load_workbook(io.BytesIO(content), read_only=True, data_only=True)
    except Exception as exc:  # openpyxl raises many types for damaged files
        raise _fail(base, f"corrupt xlsx workbook ({type(exc).__name__}: {_one_line(exc)[:120]})",
                    "open it in a spreadsheet program and save it again as .xlsx") from exc
    try:
        sheets = list(book.sheetnames)
        if not sheets:
            raise _fail(base, "the workbook has no sheets", "save a workbook that holds the table")
        if sheet is None:
            chosen = sheets[0]
        elif sheet in sheets:
            chosen = sheet
        else:
            close = [n for n in sheets if n.strip().lower() == str(sheet).strip().lower()]
            raise _fail(base, f"has no sheet {sheet!r} (sheets: {_name_list(sheets, 20)})",
                        f"did you mean {close[0]!r}? sheet names are case-sensitive" if close
                        else "pick one of those sheets")
        worksheet = book[chosen]
        if not hasattr(worksheet, "iter_rows"):
            raise _fail(base, f"sheet {chosen!r} is a chart, not a table", "pick a sheet that holds the table")
        _check_sheet_dimension(base, chosen, worksheet)
        header = None
        rows: list[tuple] = []
        cells = 0
        try:
            for row in worksheet.iter_rows(values_only=True):
                # counted as read too: a sheet without (or with a false) dimension stops at the limit
                cells += len(row)
                if len(row) > config.MAX_COLUMNS and _used_width(row) > config.MAX_COLUMNS:
                    raise _fail(base, f"sheet {chosen!r} has {_used_width(row)} columns; pairlens reads at most "
                                      f"{config.MAX_COLUMNS}", "keep fewer columns (config.MAX_COLUMNS)")
                if cells > config.MAX_XLSX_CELLS:
                    raise _xlsx_too_many_cells(base, chosen, f"more than {config.MAX_XLSX_CELLS}")
                if all(v is None or (isinstance(v, str) and not v.strip()) for v in row):
                    continue
                if header is None:
                    header = row
                    continue
                rows.append(row)
                if len(rows) > config.MAX_ROWS:
                    raise _fail(base, f"sheet {chosen!r} has more than {config.MAX_ROWS} rows; "
                                      f"pairlens reads at most {config.MAX_ROWS}",
                                "load a sample of the rows")
        except IngestError:
            raise
        except Exception as exc:
            raise _fail(base, f"corrupt xlsx workbook: sheet {chosen!r} cannot be read "
                              f"({type(exc).__name__}: {_one_line(exc)[:120]})",
                        "open it in a spreadsheet program and save it again as .xlsx") from exc
    finally:
        book.close()
    def filled(row) -> list:
        return [v for v in row if v is not None and not (isinstance(v, str) and not v.strip())]

    # a lone text cell above a row of names is a title ("Harvest 2026"), not the header
    titles = []
    while (header is not None and rows and len(filled(header)) == 1 and isinstance(filled(header)[0], str)
           and len(filled(rows[0])) >= 2 and all(isinstance(v, str) for v in filled(rows[0]))):
        titles.append(filled(header)[0])
        header = rows.pop(0)
    if titles:
        notes.append(f"skipped {_plural(len(titles), 'title row')} above the header: {_name_list(titles)}")
    if sheet is None and len(sheets) > 1:
        notes.append(f"read sheet {chosen!r}, the first of {len(sheets)} sheets")
    if header is None:
        raise _fail(base, f"empty file: sheet {chosen!r} holds no cells",
                    "pick the sheet that holds the table" if len(sheets) > 1 else "fill in the table")

    def used_width(row) -> int:
        for j in range(len(row) - 1, -1, -1):
            v = row[j]
            if v is not None and not (isinstance(v, str) and not v.strip()):
                return j + 1
        return 0

    width = max([used_width(header)] + [used_width(r) for r in rows])
    if width > config.MAX_COLUMNS:
        raise _fail(base, f"sheet {chosen!r} has {width} columns; pairlens reads at most {config.MAX_COLUMNS}",
                    "keep fewer columns (config.MAX_COLUMNS)")
    names = [_cell_text(header[j]) if j < len(header) else "" for j in range(width)]
    import pandas as pd

    columns = []
    for j in range(width):
        cells = [(_cell_text(r[j]) if j < len(r) else "") for r in rows]
        columns.append(pd.Series(cells, dtype=object))
    preview = [[(_cell_text(r[j]) if j < len(r) else "") for j in range(width)] for r in rows[:_PREVIEW_ROWS]]
    return names, columns, preview, chosen, sheets


@dataclass
class _Typed:
    kind: str
    values: np.ndarray | None = None
    reason: str = ""
    missing: int = 0
    distinct: int = 0
    non_numeric: int = 0
    examples: tuple[str, ...] = ()
    levels: tuple[str, ...] = ()


def _level_codes(present, missing: np.ndarray, n: int) -> tuple[np.ndarray, tuple[str, ...]]:
    """Codes 0..k-1 of the present cells (levels sorted as text), NaN where missing."""
    levels, inverse = np.unique(present.to_numpy(dtype=str), return_inverse=True)
    codes = np.full(n, np.nan)
    codes[~missing] = inverse.ravel()
    return codes, tuple(str(v) for v in levels)


def _categorical(reason: str, present, missing: np.ndarray, distinct: int) -> "_Typed":
    codes, levels = _level_codes(present, missing, missing.size)
    return _Typed("categorical", values=codes, reason=reason, missing=int(missing.sum()), distinct=distinct,
                  levels=levels)


def _check_parquet_size(base: str, rows: int, width: int) -> None:
    if width > config.MAX_COLUMNS:
        raise _fail(base, f"has {width} columns; pairlens reads at most {config.MAX_COLUMNS}",
                    "keep fewer columns (config.MAX_COLUMNS)")
    if rows > config.MAX_ROWS:
        raise _fail(base, f"has {rows} rows or more; pairlens reads at most {config.MAX_ROWS}",
                    _raise_hint("MAX_ROWS", "PAIRLENS_MAX_ROWS"))
    if rows * width > config.MAX_CELLS:
        raise _fail(base, f"has {rows} rows x {width} columns, more than {config.MAX_CELLS} cells; "
                          f"pairlens reads at most {config.MAX_CELLS} cells from one file",
                    "write fewer columns or rows, or " + _raise_hint("MAX_CELLS", "PAIRLENS_MAX_CELLS")[len("load a sample, or "):])


def _read_parquet(content: bytes, base: str):
    import pandas as pd
    import pyarrow as pa
    import pyarrow.compute as pc
    import pyarrow.parquet as pq

    try:
        parquet = pq.ParquetFile(pa.BufferReader(content))
        n_rows = parquet.metadata.num_rows
        schema = parquet.schema_arrow
        width = max(len(schema), 1)
        # The footer's counts are checked before anything is decoded...
        _check_parquet_size(base, n_rows, width)
        # ... and, since a footer can understate what the pages hold, the rows are counted again
        # batch by batch while reading, so a lying file stops at the limit it passes.
        batches = []
        read_rows = 0
        for batch in parquet.iter_batches(batch_size=65_536, use_threads=False):
            read_rows += batch.num_rows
            _check_parquet_size(base, read_rows, width)
            batches.append(batch)
        table = pa.Table.from_batches(batches, schema=batches[0].schema) if batches else parquet.schema_arrow.empty_table()
        batches.clear()
    except IngestError:
        raise
    except Exception as exc:  # pyarrow raises ArrowInvalid, OSError, ... for damaged files
        raise _fail(base, f"corrupt parquet file ({type(exc).__name__}: {_one_line(exc)[:120]})",
                    "write the file again, or export the table as .csv") from exc

    names = [str(n) for n in table.schema.names]
    columns: list = []
    preview_cols: list[list[str]] = []
    for column in table.columns:
        kind = column.type
        if pa.types.is_dictionary(kind):
            column = column.cast(kind.value_type)
            kind = kind.value_type
        head = column.slice(0, _PREVIEW_ROWS).to_pylist()
        if pa.types.is_floating(kind) and kind.bit_width < 64:
            # shortest text of the stored float32, not of its float64 widening
            head = [None if v is None else str(np.float32(v)) for v in head]
        preview_cols.append([_cell_text(v) for v in head])
        missing = column.null_count
        if pa.types.is_integer(kind) or pa.types.is_floating(kind) or pa.types.is_decimal(kind):
            values = column.cast(pa.float64(), safe=False).to_numpy()
            columns.append(pd.Series(values, dtype="float64"))
        elif pa.types.is_string(kind) or pa.types.is_large_string(kind) or str(kind) == "string_view":
            columns.append(pd.Series(column.to_pylist(), dtype=object))
        elif pa.types.is_boolean(kind):
            distinct = len(pc.unique(column.drop_null()))
            columns.append(_Typed("categorical", reason=f"true/false column ({_plural(distinct, 'distinct value')})",
                                  missing=missing, distinct=distinct))
        elif pa.types.is_temporal(kind):
            distinct = len(pc.unique(column.drop_null()))
            word = "duration" if pa.types.is_duration(kind) else "datetime"
            times = None
            if word == "datetime" and not pa.types.is_time(kind):  # dates and timestamps (UTC) for --ordered COL
                stamps = pc.cast(column, pa.timestamp("ns", tz=getattr(kind, "tz", None)), safe=False)
                times = _seconds(stamps.cast(pa.int64()).to_numpy(zero_copy_only=False).astype("datetime64[ns]"))
            columns.append(_Typed("datetime" if word == "datetime" else "text", values=times, reason=f"{word} column",
                                  missing=missing, distinct=distinct))
        else:
            columns.append(_Typed("text", reason=f"{kind} column (not numbers)", missing=missing))
    preview = [list(row) for row in zip(*preview_cols)] if preview_cols else []
    return names, columns, preview, table.num_rows


def _seconds(stamps) -> np.ndarray:
    """Seconds since 1970-01-01 UTC of a pandas datetime Series/Index or a datetime64 array, NaN for NaT."""
    values = np.asarray(stamps, dtype="datetime64[ns]")
    out = values.astype("int64").astype(np.float64) / 1e9
    out[np.isnat(values)] = np.nan
    return out


def _text_times(present) -> np.ndarray:
    """Seconds (UTC) of the date/time texts of a datetime column, NaN for a cell that cannot be read.

    ISO 8601 first (2024-05-31, 2024-05-31T12:00+02:00); otherwise one day-first or month-first
    reading for the whole column, so that 01.05.2024 and 31.05.2024 are read alike: day first when
    the dates are written with dots (31.05.2024) or a first number exceeds 12, month first else
    (5/31/24, common practice in US files). Texts without a zone count as UTC.
    """
    import pandas as pd

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # pandas warns when it falls back to dateutil per cell
        iso = pd.to_datetime(present, format="ISO8601", errors="coerce", utc=True)
        if iso.notna().sum() >= config.NUMERIC_MIN_SHARE * len(present):
            return _seconds(iso.dt.tz_localize(None))
        first = present.str.extract(r"^\s*(\d{1,2})([./-])\d{1,2}[./-]")
        dayfirst = bool((first[1] == ".").any() or (pd.to_numeric(first[0], errors="coerce") > 12).any())
        mixed = pd.to_datetime(present, format="mixed", dayfirst=dayfirst, errors="coerce", utc=True)
        return _seconds(mixed.dt.tz_localize(None))


def _numeric(values: np.ndarray, non_numeric: int = 0, examples: tuple[str, ...] = ()) -> _Typed:
    values = np.array(values, dtype=np.float64, copy=True)
    return _Typed("numeric", values=values, non_numeric=non_numeric, examples=examples)


def _classify_strings(series, decimal_comma: bool) -> _Typed:
    import pandas as pd

    if series.isna().all():
        return _Typed("empty", reason="all values missing", missing=len(series))
    clean = _as_text(series).str.strip()
    missing = (clean.isna() | clean.str.lower().isin(_NA_TOKENS)).to_numpy(dtype=bool)
    present = clean[~missing]
    n_present = len(present)
    n_missing = int(missing.sum())
    if n_present == 0:
        return _Typed("empty", reason="all values missing", missing=n_missing)
    source = present.str.replace(",", ".", regex=False) if decimal_comma else present
    numbers = pd.to_numeric(source, errors="coerce").to_numpy(dtype=np.float64, na_value=np.nan)
    parsed = ~np.isnan(numbers)
    n_parsed = int(parsed.sum())
    if n_parsed > 0 and n_parsed >= config.NUMERIC_MIN_SHARE * n_present:
        full = np.full(len(series), np.nan)
        full[~missing] = numbers
        junk = present[~parsed]
        examples = tuple(pd.unique(junk.to_numpy())[:3].tolist())
        return _numeric(full, non_numeric=n_present - n_parsed, examples=examples)
    distinct = int(present.nunique())
    if present.str.lower().isin(_BOOL_TOKENS).all():
        return _categorical(f"true/false column ({_plural(distinct, 'distinct value')})", present, missing, distinct)
    n_dates = int(present.str.fullmatch(_DATETIME_RE).sum())
    if n_dates >= config.NUMERIC_MIN_SHARE * n_present:
        times = np.full(len(series), np.nan)  # kept for --ordered COL (rows sorted by time)
        times[~missing] = _text_times(present)
        return _Typed("datetime", values=times, reason="datetime column", missing=n_missing, distinct=distinct)
    if n_parsed >= 0.5 * n_present:
        share = f"{n_parsed} of {n_present}"
        return _Typed("text", reason=f"mixed column: only {share} values are numbers "
                                     f"(at least {config.NUMERIC_MIN_SHARE:.0%} needed)",
                      missing=n_missing, distinct=distinct)
    if distinct <= _CATEGORICAL_MAX_DISTINCT and distinct <= n_present / 2:
        return _categorical(f"categorical column ({_plural(distinct, 'distinct value')})", present, missing, distinct)
    return _Typed("text", reason=f"text column ({_plural(distinct, 'distinct value')})",
                  missing=n_missing, distinct=distinct)


def _is_text_dtype(dtype) -> bool:
    import pandas as pd

    return dtype == object or isinstance(dtype, pd.StringDtype)


def _as_text(series):
    """The same cells as str, missing ones NaN (pandas 2 object columns and pandas 3 str alike)."""
    import pandas as pd

    if isinstance(series.dtype, pd.StringDtype):
        return series
    return series.astype(object).map(_cell_text, na_action="ignore").astype(object)


def _cell_missing(series) -> np.ndarray:
    if isinstance(series, np.ndarray):  # a column of the plain-numbers reader
        return np.isnan(series)
    missing = series.isna().to_numpy(dtype=bool)
    if _is_text_dtype(series.dtype) and not missing.all():
        blank = _as_text(series).str.strip() == ""
        missing = missing | blank.to_numpy(dtype=bool, na_value=True)
    return missing


def _type_column(series, decimal_comma: bool) -> _Typed:
    import pandas as pd
    from pandas.api import types as ptypes

    dtype = series.dtype
    if ptypes.is_bool_dtype(dtype):
        distinct = int(series.nunique())
        missing = series.isna().to_numpy(dtype=bool)
        return _categorical(f"true/false column ({_plural(distinct, 'distinct value')})",
                            series[~missing].astype(str), missing, distinct)
    if ptypes.is_numeric_dtype(dtype) and not ptypes.is_complex_dtype(dtype):
        return _numeric(series.to_numpy(dtype=np.float64, na_value=np.nan))
    if ptypes.is_datetime64_any_dtype(dtype) or isinstance(dtype, pd.PeriodDtype):
        stamps = series.dt.to_timestamp() if isinstance(dtype, pd.PeriodDtype) else series
        if getattr(stamps.dt, "tz", None) is not None:
            stamps = stamps.dt.tz_convert("UTC").dt.tz_localize(None)
        return _Typed("datetime", values=_seconds(stamps), reason="datetime column",
                      missing=int(series.isna().sum()), distinct=int(series.nunique()))
    if ptypes.is_timedelta64_dtype(dtype):
        return _Typed("text", reason="duration column", missing=int(series.isna().sum()),
                      distinct=int(series.nunique()))
    # object columns may hold Python bools (the CSV parser's True/False cells mixed with
    # missing ones), numbers or dates: _as_text makes every cell its text
    return _classify_strings(series, decimal_comma)


def _unique_names(originals: list[str], notes: list[str]) -> list[str]:
    names: list[str] = []
    taken: set[str] = set()
    renamed: list[str] = []
    filled: list[str] = []
    for position, original in enumerate(originals, start=1):
        base = _one_line(original)
        if not base:
            base = f"column {position}"
        name, k = base, 2
        while name in taken:
            name, k = f"{base} ({k})", k + 1
        if not _one_line(original):
            filled.append(name)
        elif name != base:
            renamed.append(f"{base!r} -> {name!r}")
        taken.add(name)
        names.append(name)
    if renamed:
        shown = ", ".join(renamed[:10]) + (f" and {len(renamed) - 10} more" if len(renamed) > 10 else "")
        notes.append(f"duplicate column names made unique: {shown}")
    if filled:
        notes.append(f"empty column names filled in: {_name_list(filled, 10)}")
    return names


def _build_table(base: str, sha: str, originals: list[str], columns: list, preview: list[list[str]],
                 notes: list[str], decimal_comma: bool, n_rows: int | None = None) -> Table:
    if not originals:
        raise _fail(base, "empty file: it holds no table", "choose the file that holds the table")
    names = _unique_names([_cell_text(o) if not isinstance(o, str) else o for o in originals], notes)
    if n_rows is None:
        n_rows = len(columns[0]) if columns and not isinstance(columns[0], _Typed) else 0
    if n_rows == 0:
        raise _fail(base, "header only: the file has column names but no data rows",
                    "add data rows below the header")
    if n_rows > config.MAX_ROWS:
        raise _fail(base, f"has more than {config.MAX_ROWS} data rows; pairlens reads at most {config.MAX_ROWS}",
                    "load a sample of the rows")

    # rows with every cell empty carry nothing (spreadsheet exports often end with ",,,")
    if columns and not any(isinstance(c, _Typed) for c in columns):
        empty_rows = np.ones(n_rows, dtype=bool)
        for c in columns:
            empty_rows &= _cell_missing(c)
            if not empty_rows.any():
                break
        if empty_rows.any():
            dropped = int(empty_rows.sum())
            notes.append(f"dropped {_plural(dropped, 'row')} with every cell empty or missing")
            keep = ~empty_rows
            columns = [c[keep] if isinstance(c, np.ndarray) else c[keep].reset_index(drop=True)
                       for c in columns]
            n_rows -= dropped
    if n_rows == 0:
        raise _fail(base, "header only: the file has column names but no data rows",
                    "add data rows below the header")
    if n_rows < config.MIN_ROWS:
        raise _fail(base, f"fewer than {config.MIN_ROWS} data rows: it has only {n_rows}",
                    f"pairlens needs at least {config.MIN_ROWS} rows to measure an association")

    typed = [c if isinstance(c, _Typed) else _numeric(c) if isinstance(c, np.ndarray)
             else _type_column(c, decimal_comma) for c in columns]

    info: list[ColumnInfo] = []
    used_names: list[str] = []
    used_values: list[np.ndarray] = []
    times: dict[str, np.ndarray] = {}
    for name, original, t, c in zip(names, originals, typed, columns):
        original_text = original if isinstance(original, str) else _cell_text(original)
        if t.kind == "categorical" and t.values is not None:
            # kept as level codes (issue 18); beyond the level limit a column stays out with the fix
            if t.distinct > config.CATEGORICAL_MAX_LEVELS:
                reason = (f"{t.reason}: more than {config.CATEGORICAL_MAX_LEVELS} levels, too many to compare "
                          "(merge levels, or raise PAIRLENS_CATEGORICAL_MAX_LEVELS)")
                info.append(ColumnInfo(name, original_text, t.kind, False, reason, t.missing, 0, t.distinct))
                continue
            if t.distinct < 2:
                info.append(ColumnInfo(name, original_text, t.kind, False, f"{t.reason}: a single level",
                                       t.missing, 0, t.distinct))
                continue
            info.append(ColumnInfo(name, original_text, t.kind, True, "", t.missing, 0, t.distinct,
                                   levels=t.levels))
            used_names.append(name)
            used_values.append(t.values)
            continue
        if t.kind != "numeric":
            info.append(ColumnInfo(name, original_text, t.kind, False, t.reason, t.missing, 0, t.distinct))
            if t.kind == "datetime" and t.values is not None:
                times[name] = t.values
            continue
        values = t.values
        # -0 and 0 are the same number to every measure; one zero keeps the readers and
        # formats from differing by a sign bit (pandas reads "-0" in integer columns as 0)
        values[values == 0] = 0.0
        infinite_mask = np.isinf(values)
        n_inf = int(infinite_mask.sum())
        if n_inf:
            values[infinite_mask] = np.nan
        finite = values[~np.isnan(values)]
        n_missing = int(values.size - finite.size)
        if t.non_numeric:
            notes.append(f"column {name!r}: {_plural(t.non_numeric, 'non-numeric cell')} "
                         f"counted as missing (e.g. {', '.join(_quote(e, 20) for e in t.examples)})")
        if n_inf:
            notes.append(f"column {name!r}: {_plural(n_inf, 'infinite value')} counted as missing")
        if finite.size == 0:
            reason = "all values missing"
            parts = [_plural(n, word) for n, word in ((n_inf, "infinite value"), (t.non_numeric, "non-number")) if n]
            if parts:
                reason += f" ({', '.join(parts)})"
            info.append(ColumnInfo(name, original_text, "empty", False, reason, n_missing, n_inf, 0,
                                   non_numeric=t.non_numeric))
            continue
        distinct = int(np.unique(finite).size)
        low, mid, high = float(finite.min()), float(np.median(finite)), float(finite.max())
        if distinct == 1:
            notes.append(f"column {name!r} is constant (every value {low:g}); its measures will be undefined")
        elif class_code_levels(finite):
            notes.append(f"column {name!r} looks like a class code ({distinct} distinct whole numbers); "
                         f"analysed as categorical (--numeric {name} keeps it a number)")
        info.append(ColumnInfo(name, original_text, "numeric", True, "", n_missing, n_inf, distinct,
                               low, mid, high, non_numeric=t.non_numeric))
        used_names.append(name)
        used_values.append(values)

    if len(used_names) < 2:
        others = [c for c in info if not c.used]
        found = f"found {_plural(len(used_names), 'numeric column')}"
        if used_names:
            found += f" ({_name_list(used_names)})"
        if others:
            listed = "; ".join(f"{_quote(c.name)}: {c.reason}" for c in others[:4])
            if len(others) > 4:
                listed += f"; and {len(others) - 4} more"
            found += f" and {_plural(len(others), 'other column')} ({listed})"
        fix = "pairlens needs at least 2 numeric columns"
        if len(info) == 1:
            fix += "; the whole line became one column, so check the delimiter (comma, semicolon, tab or pipe)"
        raise _fail(base, f"fewer than 2 numeric columns: {found}", fix)

    data = np.empty((n_rows, len(used_values)), dtype=np.float64)
    for j, values in enumerate(used_values):
        data[:, j] = values
    return Table(name=base, sha256=sha, n_rows=n_rows, columns=used_names, data=data, info=info,
                 notes=notes, preview=[list(map(str, r)) for r in preview], preview_header=names, times=times)


def _load(content: bytes, base: str, sheet: str | None) -> Table:
    sha = hashlib.sha256(content).hexdigest()
    fmt = _format_from_name(base)
    if not content or content.isspace():
        raise _fail(base, "empty file: it holds no table", "choose the file that holds the table")
    notes: list[str] = []
    kind = _magic(content)
    stem = _stem(base)
    if sheet is not None and fmt != "xlsx":
        notes.append(f"sheet {sheet!r} ignored: only .xlsx workbooks have sheets")

    if fmt == "xlsx":
        if kind != "xlsx":
            if kind == "ole2":
                raise _fail(base, "is an old Excel .xls workbook with an .xlsx name",
                            "save it from Excel as .xlsx or .csv")
            if kind is None and _looks_like_text(content):
                raise _fail(base, "is not an Excel workbook: the content is text",
                            f"if it is a delimited table, rename it to {stem}.csv")
            if kind in (None, "zip"):
                raise _fail(base, "corrupt xlsx workbook: it is not a valid .xlsx (ZIP) file",
                            "open it in a spreadsheet program and save it again as .xlsx")
            raise _refuse_binary(base, kind, stem)
        names, columns, preview, chosen, sheets = _read_xlsx(content, base, sheet, notes)
        table = _build_table(base, sha, names, columns, preview, notes, decimal_comma=False)
        table.format, table.sheet, table.sheets = "xlsx", chosen, sheets
        return table

    if fmt == "parquet":
        if not (content[:4] == b"PAR1" and content[-4:] == b"PAR1"):
            if kind is None and _looks_like_text(content):
                raise _fail(base, "is not a Parquet file: the content is text",
                            f"if it is a delimited table, rename it to {stem}.csv")
            if kind is not None and kind != "parquet":
                raise _refuse_binary(base, kind, stem)
            raise _fail(base, "corrupt parquet file: the PAR1 markers at its start and end are missing "
                              "(truncated or not Parquet)",
                        "write the file again, or export the table as .csv")
        names, columns, preview, n_rows = _read_parquet(content, base)
        table = _build_table(base, sha, names, columns, preview, notes, decimal_comma=False, n_rows=n_rows)
        table.format = "parquet"
        return table

    raw = content
    if fmt == "csv.gz":
        if kind != "gzip":
            if kind is None and _looks_like_text(content):
                raise _fail(base, "is not gzip-compressed: the content is plain text",
                            f"rename it to {stem}.csv")
            if kind is None:
                raise _fail(base, "corrupt gzip data: the gzip header is missing",
                            "compress the file again, or load the uncompressed .csv")
            raise _refuse_binary(base, kind, stem)
        raw = _gunzip(content, base)
        if not raw or raw.isspace():
            raise _fail(base, "empty file: it decompresses to nothing", "compress the file that holds the table")
        inner = _magic(raw)
        if inner is not None:
            raise _fail(base, f"binary or not a table: it decompresses to {_MAGIC_WORDS.get(inner, 'binary data')}",
                        "archive: extract the table first" if inner in _ARCHIVE_KINDS | {"gzip"}
                        else "compress the .csv that holds the table")
    elif kind is not None:
        raise _refuse_binary(base, kind, stem)
    else:
        _check_text_size(base, _line_count(raw) + (0 if raw.endswith((b"\n", b"\r")) else 1),
                         _head_width(raw[:_SNIFF_CHARS]), len(raw))

    text, encoding = _decode(raw, base, notes)
    names, columns, preview, delimiter, decimal_comma = _read_text_table(text, base, notes)
    table = _build_table(base, sha, names, columns, preview, notes, decimal_comma)
    table.format, table.encoding, table.delimiter = fmt, encoding, delimiter
    table.decimal = "," if decimal_comma else "."
    return table


# ---------------------------------------------------------------------------
# public API
# ---------------------------------------------------------------------------


def load_bytes(content: bytes, name: str, *, sheet: str | None = None) -> Table:
    """Parse an uploaded file's bytes into a typed table.

    Parameters
    ----------
    content : bytes
        The file exactly as stored (compressed bytes for .csv.gz); ``Table.sha256`` hashes them.
    name : str
        The file's name; only its extension picks the format and its base name labels messages.
    sheet : str, optional
        Worksheet of an .xlsx workbook (default: the first sheet).

    Returns
    -------
    Table
        Numeric columns in ``data`` (float64, NaN for missing); every column described in ``info``.

    Raises
    ------
    IngestError
        For every file that cannot be used; ``str()`` is one line naming the file, the problem
        and a fix.  No other exception type leaves this function.
    """
    base = _display_name(name)
    try:
        if not isinstance(content, (bytes, bytearray, memoryview)):
            raise _fail(base, f"expected the file's bytes, got {type(content).__name__}",
                        "pass the raw file content")
        return _load(bytes(content), base, sheet)
    except IngestError:
        raise
    except MemoryError as exc:
        raise _fail(base, "too large to load into memory", "load a sample of the rows or fewer columns") from exc
    except RecursionError as exc:
        raise _fail(base, "too deeply nested to read", "export the table as a plain .csv") from exc
    except Exception as exc:  # noqa: BLE001 - parsers raise many types; the user gets one line
        raise _fail(base, f"could not be read ({type(exc).__name__}: {_one_line(exc)[:160]})",
                    f"check that it is a valid file of its type ({SUPPORTED_FORMATS})") from exc


def _file_limit_bytes() -> int:
    # No format holds a usable table in more bytes than the text limit: a .csv is that text,
    # workbooks and Parquet files are compressed.
    return int(config.MAX_DECOMPRESSED_MB) * 1024 * 1024


def read_file_bytes(path: str | Path) -> bytes:
    """The bytes of a regular file (never a device, pipe or socket, even through a link), bounded."""
    import stat

    base = _display_name(path)
    try:
        info = os.stat(path)  # follows links: a .csv link to /dev/zero is a device
        if stat.S_ISDIR(info.st_mode):
            raise _fail(base, "is a directory, not a file", "give the table file inside it")
        if not stat.S_ISREG(info.st_mode):
            raise _fail(base, "is not a regular file (a device, pipe or socket)",
                        "save the table to a file and give its path")
        if info.st_size > _file_limit_bytes():
            raise _fail(base, f"is larger than {config.MAX_DECOMPRESSED_MB} MB",
                        _raise_hint("MAX_DECOMPRESSED_MB", "PAIRLENS_MAX_TEXT_MB"))
        with open(path, "rb") as handle:
            content = handle.read(_file_limit_bytes() + 1)
    except IngestError:
        raise
    except FileNotFoundError as exc:
        raise _fail(base, "file not found", "check the path") from exc
    except IsADirectoryError as exc:
        raise _fail(base, "is a directory, not a file", "give the table file inside it") from exc
    except PermissionError as exc:
        raise _fail(base, "permission denied", "check that you may read the file") from exc
    except (OSError, ValueError) as exc:
        raise _fail(base, f"cannot be opened ({_one_line(exc)})", "check the path") from exc
    if len(content) > _file_limit_bytes():  # it grew while being read
        raise _fail(base, f"is larger than {config.MAX_DECOMPRESSED_MB} MB",
                    _raise_hint("MAX_DECOMPRESSED_MB", "PAIRLENS_MAX_TEXT_MB"))
    return content


def load_table(path: str | Path, *, sheet: str | None = None) -> Table:
    """Read a regular file from disk (.csv .tsv .txt .csv.gz .xlsx .parquet); see :func:`load_bytes`."""
    return load_bytes(read_file_bytes(path), _display_name(path), sheet=sheet)


# ---------------------------------------------------------------------------
# parsing in a child process (the server)
# ---------------------------------------------------------------------------

_LIMIT_NAMES = ("MAX_ROWS", "MAX_COLUMNS", "MAX_CELLS", "MAX_XLSX_CELLS", "MAX_DECOMPRESSED_MB", "NUMERIC_MIN_SHARE")
_context_lock = threading.Lock()
_context = None


def _vm_size_bytes() -> int:
    try:
        with open("/proc/self/status") as status:
            for line in status:
                if line.startswith("VmSize:"):
                    return int(line.split()[1]) * 1024
    except OSError:
        pass
    return 0


def _parse_child(conn, path: str, name: str, sheet, limits: dict, memory_bytes: int) -> None:
    """Child side of :func:`load_file_isolated`: cap the address space, parse, send the table back."""
    try:
        import resource

        ceiling = _vm_size_bytes() + memory_bytes
        resource.setrlimit(resource.RLIMIT_AS, (ceiling, ceiling))
    except (ImportError, ValueError, OSError):  # pragma: no cover - not Linux: the time limit still holds
        pass
    for key, value in limits.items():
        setattr(config, key, value)
    try:
        table = load_bytes(read_file_bytes(path), name, sheet=sheet)
        conn.send(("ok", table))
    except IngestError as exc:
        conn.send(("error", str(exc)))
    except BaseException as exc:  # noqa: BLE001 - MemoryError past the cap, anything else
        conn.send(("error", f"{type(exc).__name__}"))
    finally:
        conn.close()


def _spawn_context():
    """A forkserver that has imported the readers once: each parse forks a clean, single-threaded child."""
    global _context
    import multiprocessing

    with _context_lock:
        if _context is None:
            methods = multiprocessing.get_all_start_methods()
            ctx = multiprocessing.get_context("forkserver" if "forkserver" in methods else "spawn")
            if "forkserver" in methods:
                ctx.set_forkserver_preload(["numpy", "pandas", "pyarrow", "pyarrow.csv", "pyarrow.parquet",
                                            "openpyxl", "pairlens.ingest"])
            _context = ctx
        return _context


def load_file_isolated(path: str | Path, name: str, *, sheet: str | None = None,
                       memory_mb: int | None = None, seconds: float | None = None) -> Table:
    """:func:`load_bytes` on a stored file, run in a child process with a memory and a time limit.

    The server parses every upload this way, so no file can take the server's memory or
    hold one of its threads for long: a child that passes ``config.PARSE_MEMORY_MB`` of new
    address space (RLIMIT_AS) or ``config.PARSE_SECONDS`` is stopped and the file refused
    with an :class:`IngestError` naming the limit.
    """
    base = _display_name(name)
    memory_mb = int(config.PARSE_MEMORY_MB if memory_mb is None else memory_mb)
    seconds = float(config.PARSE_SECONDS if seconds is None else seconds)
    limits = {key: getattr(config, key) for key in _LIMIT_NAMES}
    ctx = _spawn_context()
    receiver, sender = ctx.Pipe(duplex=False)
    child = ctx.Process(target=_parse_child, args=(sender, str(path), name, sheet, limits, memory_mb << 20),
                        daemon=True, name="pairlens-parse")
    import sys
    import types

    with _context_lock:
        # The child needs pairlens.ingest only; without this, multiprocessing re-runs the caller's main
        # script (a user's script, the CLI, a test runner) in the child before parsing.
        main = sys.modules["__main__"]
        sys.modules["__main__"] = types.ModuleType("__main__")
        try:
            child.start()
        finally:
            sys.modules["__main__"] = main
    sender.close()
    try:
        if not receiver.poll(seconds):
            raise _fail(base, f"took longer than {seconds:g} s to read (config.PARSE_SECONDS)",
                        "save it as .csv or .parquet, load a sample, or raise the limit "
                        "(the PAIRLENS_PARSE_SECONDS environment variable)")
        try:
            outcome, value = receiver.recv()
        except (EOFError, OSError):
            outcome, value = "error", "ended"
    finally:
        receiver.close()
        if child.is_alive():
            child.kill()
        child.join(5)
    if outcome == "ok":
        return value
    if value in ("MemoryError", "ended", "ArrowMemoryError"):
        raise _fail(base, f"needs more than {memory_mb} MB of memory to read (config.PARSE_MEMORY_MB)",
                    "load a sample of the rows or fewer columns, or raise the limit "
                    "(the PAIRLENS_PARSE_MEMORY_MB environment variable)")
    if value.startswith(base + ":") or ":" in value:
        raise IngestError(value)
    raise _fail(base, f"could not be read ({value})", f"check that it is a valid file of its type ({SUPPORTED_FORMATS})")
