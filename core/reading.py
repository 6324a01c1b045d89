"""Reading a table file into a DataFrame, in memory, with an account of how.

:func:`read_table` takes a path, the file's bytes or a binary file-like object
and returns a :class:`RawTable`: the DataFrame as read plus a
:class:`ReadInfo` saying which format, delimiter, decimal mark, encoding and
sheet were used and anything noteworthy found on the way. Nothing is written
to disk: an upload is read from its bytes.

Formats
-------
* CSV / TSV / any delimited text (optionally gzip-compressed). The delimiter
  (comma, semicolon, tab or pipe) and the decimal mark (point or comma) are
  detected from the first 64 KiB unless given; a decimal comma with a point
  as thousands separator (``1.234,56``) is recognised. Parsing uses pyarrow's
  multi-threaded CSV reader; a row with more or fewer fields than the header
  is an error naming its position.
* Parquet (pyarrow). Float32 columns are kept as float32 so the intake can
  warn about them.
* Excel ``.xlsx`` (openpyxl): the first sheet, or the sheet named. A cell
  holding a formula whose result was never saved (a file written by a program
  that does not calculate formulas) is not read as empty: its position is
  recorded in :attr:`ReadInfo.formula_cells` and the intake refuses a mapped
  column that has any.

Encodings (text files): UTF-8 with or without a byte-order mark, UTF-16 with
a byte-order mark, or the encoding named. A file that is not valid UTF-8 is
read as Windows-1252 when that decodes it, and the fallback is stated in the
notes; otherwise the error names the first undecodable data row.

Row positions in every message are 1-based data rows (the header excluded;
blank lines in a text file are skipped and not counted).
"""

from __future__ import annotations

import csv
import gzip
import io
import os
import re
import zlib
from collections.abc import Iterable, Sequence
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from core.errors import InputError

__all__ = [
    "FORMATS",
    "MISSING_TEXT",
    "RawTable",
    "ReadInfo",
    "missing_column_error",
    "read_table",
    "text_to_number",
]

FORMATS = ("csv", "tsv", "parquet", "excel")

#: Text read as a missing value (the same list for every format).
MISSING_TEXT = (
    "",
    "#N/A",
    "#N/A N/A",
    "#NA",
    "-1.#IND",
    "-1.#QNAN",
    "-NaN",
    "-nan",
    "1.#IND",
    "1.#QNAN",
    "N/A",
    "NA",
    "NULL",
    "NaN",
    "n/a",
    "nan",
    "null",
)

_SAMPLE_BYTES = 1 << 16
_DELIMITERS = ("\t", ";", ",", "|")
_DELIMITER_NAMES = {",": "comma", ";": "semicolon", "\t": "tab", "|": "pipe"}

_DEC_COMMA = re.compile(r"^[+-]?(\d+,\d+|\d{1,3}(\.\d{3})+,\d+|,\d+)([eE][+-]?\d+)?$")
_DEC_POINT = re.compile(r"^[+-]?(\d+\.\d+|\d+\.|\.\d+)([eE][+-]?\d+)?$")
_GROUPED_POINT = re.compile(r"^[+-]?\d{1,3}(\.\d{3})+(,\d+)?$")

_MAGIC_GZIP = b"\x1f\x8b"
_MAGIC_PARQUET = b"PAR1"
_MAGIC_ZIP = b"PK\x03\x04"
_MAGIC_OLE = b"\xd0\xcf\x11\xe0\xa1\xb1\x1a\xe1"


@dataclass(frozen=True)
class ReadInfo:
    """How a file was read.

    Attributes
    ----------
    format : str
        ``"csv"``, ``"tsv"``, ``"parquet"`` or ``"excel"``.
    delimiter, decimal, thousands : str or None
        For text files: the field delimiter, the decimal mark and the
        thousands separator (None when there is none).
    encoding : str or None
        For text files: ``"utf-8"``, ``"utf-8-sig"`` (UTF-8 with a byte-order
        mark), ``"utf-16"``, the encoding named, or ``"cp1252"`` after a
        fallback (``encoding_fallback`` is then True).
    sheet : str or None
        The sheet read (Excel); ``sheet_names`` lists every sheet.
    compression : str or None
        ``"gzip"`` when the bytes were gzip-compressed.
    file_name : str or None
    n_rows : int
        Data rows read (header excluded).
    float32_columns : tuple of str
        Columns stored as 32-bit floats in the source (Parquet).
    formula_cells : dict
        Column -> 0-based data positions of formula cells without a saved
        result (Excel).
    notes : tuple of str
        Plain-language remarks about the read (detections, fallbacks).
    """

    format: str
    delimiter: str | None = None
    decimal: str | None = None
    thousands: str | None = None
    encoding: str | None = None
    sheet: str | None = None
    sheet_names: tuple[str, ...] = ()
    compression: str | None = None
    file_name: str | None = None
    n_rows: int = 0
    float32_columns: tuple[str, ...] = ()
    formula_cells: dict = field(default_factory=dict)
    encoding_fallback: bool = False
    notes: tuple[str, ...] = ()


@dataclass(frozen=True, eq=False)
class RawTable:
    """A table as read: ``frame`` (a DataFrame, columns as in the file) and ``info``."""

    frame: pd.DataFrame
    info: ReadInfo

    @property
    def columns(self) -> list[str]:
        return [str(c) for c in self.frame.columns]

    @property
    def n_rows(self) -> int:
        return int(self.frame.shape[0])

    @property
    def file_name(self) -> str | None:
        return self.info.file_name


# --------------------------------------------------------------------------- helpers


def _label(file_name: str | None) -> str:
    return file_name if file_name else "The file"


def _reason(exc: BaseException) -> str:
    """A library's error text on one line (the message is one line in the app and the CLI)."""
    return " ".join(str(exc).split()) or type(exc).__name__


def _file_error(label: str, problem: str, positions=None, *, hint: str = "") -> InputError:
    """An error about the file as a whole: "data.csv is empty (...)"."""
    return InputError(None, f"{label} {problem}", positions, hint=hint)


def _quote_list(names: Iterable[str], limit: int = 12) -> str:
    names = list(names)
    shown = ", ".join(repr(str(n)) for n in names[:limit])
    if len(names) > limit:
        shown += f" and {len(names) - limit} more"
    return shown


def missing_column_error(
    column: str, role: str, available: Sequence[str], delimiter: str | None = None
) -> InputError:
    """The error for a mapped column that the file does not have.

    When the file has a single column whose name contains another delimiter,
    the message says which delimiter to choose.
    """
    hint = ""
    if len(available) == 1:
        only = str(available[0])
        for cand in _DELIMITERS:
            if cand != delimiter and cand in only:
                hint = (
                    f"The file was read as one column; its header contains "
                    f"{_DELIMITER_NAMES[cand]}s, so choose delimiter={cand!r}"
                )
                break
    return InputError(
        column,
        f"is mapped as the {role} but is not a column of the file; "
        f"its columns are {_quote_list(available)}",
        hint=hint,
    )


def _role(columns, name: str) -> str:
    if isinstance(columns, dict):
        return str(columns.get(name, "requested column"))
    return "requested column"


def _source_bytes(source, file_name: str | None) -> tuple[bytes, str | None]:
    """The whole input as bytes (read in memory) and its name."""
    if isinstance(source, (bytes, bytearray, memoryview)):
        return bytes(source), file_name
    if isinstance(source, (str, os.PathLike)):
        path = Path(source)
        if not path.is_file():
            raise InputError(str(path), "no such file")
        return path.read_bytes(), file_name or path.name
    if hasattr(source, "read"):
        name = file_name or getattr(source, "name", None)
        name = os.path.basename(name) if isinstance(name, str) else None
        if hasattr(source, "getvalue"):
            data = source.getvalue()
        else:
            if hasattr(source, "seek"):
                try:
                    source.seek(0)
                except (OSError, ValueError):
                    pass
            data = source.read()
        if isinstance(data, str):
            raise _file_error(
                _label(name),
                "was opened in text mode; open it in binary mode ('rb') or pass its bytes",
            )
        return bytes(data), name
    raise InputError(
        "source", f"must be a path, bytes or a binary file object, got {type(source).__name__}"
    )


def _extension(file_name: str | None) -> str:
    if not file_name:
        return ""
    name = file_name.lower()
    name = name.removesuffix(".gz")
    return Path(name).suffix


def _row_of_offset(data: bytes, offset: int) -> str:
    """'the header' or 'data row k' for a byte offset of a text file."""
    line = data.count(b"\n", 0, offset)
    return "the header" if line == 0 else f"data row {line}"


def _clean_names(names: Sequence, notes: list[str]) -> list[str]:
    """Column names as text: surrounding spaces removed, empty names numbered."""
    out = []
    stripped = renamed = 0
    for k, raw in enumerate(names):
        name = "" if raw is None else str(raw)
        clean = name.strip()
        if clean != name:
            stripped += 1
        if not clean:
            clean = f"column {k + 1}"
            renamed += 1
        out.append(clean)
    if stripped:
        notes.append(f"Spaces around {stripped} column name(s) were removed.")
    if renamed:
        notes.append(
            f"{renamed} column(s) had no name in the header and are called "
            f"'column N' by their position."
        )
    return out


def _check_duplicates(names: Sequence[str]) -> None:
    seen: dict[str, list[int]] = {}
    for k, n in enumerate(names):
        seen.setdefault(n, []).append(k + 1)
    dups = {n: ks for n, ks in seen.items() if len(ks) > 1}
    if dups:
        name, where = next(iter(dups.items()))
        cols = ", ".join(str(k) for k in where[:-1]) + f" and {where[-1]}"
        more = ""
        if len(dups) > 1:
            more = f"; other repeated names: {_quote_list(list(dups)[1:])}"
        raise InputError(
            name,
            f"appears {len(where)} times in the header (columns {cols}){more}",
            hint="Give every column its own name",
        )


# --------------------------------------------------------------------------- text: detection


def _decode_sample(data: bytes) -> str:
    cut = data[:_SAMPLE_BYTES]
    if len(data) > _SAMPLE_BYTES:
        last = cut.rfind(b"\n")
        if last > 0:
            cut = cut[: last + 1]
    return cut.decode("utf-8")


def _sample_rows(sample: str, delimiter: str) -> list[list[str]]:
    rows = [r for r in csv.reader(io.StringIO(sample, newline=""), delimiter=delimiter) if r]
    return rows[:1000]


def _detect_delimiter(sample: str, preferred: str) -> tuple[str, bool]:
    """(delimiter, found): the candidate whose rows most consistently match the header."""
    best = None
    for cand in _DELIMITERS:
        rows = _sample_rows(sample, cand)
        if not rows:
            continue
        width = len(rows[0])
        if width < 2:
            continue
        body = rows[1:-1] if len(rows) > 2 else rows[1:]
        consistency = 1.0 if not body else sum(len(r) == width for r in body) / len(body)
        key = (consistency, width, cand == preferred)
        if best is None or key > best[0]:
            best = (key, cand)
    if best is None:
        return preferred, False
    return best[1], True


_DIGITS = re.compile(r"^\d+$")


def _zero_padded(rows: list[list[str]]) -> list[int]:
    """Columns of whole numbers written with leading zeros (ids such as 00123).

    Read as numbers, 00123 and 0123 would both become 123 and two ids one;
    such columns are kept as text.
    """
    width = len(rows[0]) if rows else 0
    out = []
    for k in range(width):
        vals = [r[k].strip() for r in rows[1:] if k < len(r) and r[k].strip()]
        if (
            vals
            and all(_DIGITS.match(v) for v in vals)
            and any(len(v) > 1 and v[0] == "0" for v in vals)
        ):
            out.append(k)
    return out


def _detect_decimal(rows: list[list[str]], delimiter: str) -> tuple[str, str | None]:
    """(decimal mark, thousands separator) from the sample's data fields."""
    if not any("," in f for row in rows[1:] for f in row):
        return ".", None  # no field holds a comma: no decimal comma (the loop's answer, sooner)
    n_comma = n_point = n_grouped = 0
    for row in rows[1:]:
        for f in row:
            f = f.strip()
            if not f or not (f[0].isdigit() or f[0] in "+-,."):
                continue
            if _DEC_COMMA.match(f):
                n_comma += 1
                if "." in f:
                    n_grouped += 1
            elif _DEC_POINT.match(f):
                if _GROUPED_POINT.match(f):
                    n_grouped += 1
                else:
                    n_point += 1
    if n_comma > 0 and n_comma > n_point:
        return ",", ("." if n_grouped else None)
    return ".", None


# --------------------------------------------------------------------------- text: decoding


def _to_utf8(
    data: bytes, encoding: str | None, label: str, notes: list[str]
) -> tuple[bytes, str, bool]:
    """UTF-8 bytes of a text file, the encoding used and whether it was a fallback."""
    if encoding is not None:
        enc = encoding.lower().replace("_", "-")
        if enc in ("utf-8", "utf8", "utf-8-sig"):
            encoding = None  # the default path below handles both
        else:
            try:
                text = data.decode(encoding)
            except LookupError:
                raise InputError(
                    "encoding", f"{encoding!r} is not an encoding Python knows"
                ) from None
            except UnicodeDecodeError as exc:
                raise _file_error(
                    label,
                    f"cannot be decoded as {encoding} "
                    f"(first undecodable byte in {_row_of_offset(data, exc.start)})",
                    hint="Choose the file's encoding, or save it as UTF-8",
                ) from None
            notes.append(f"Read with the encoding {encoding}, as chosen.")
            return text.lstrip("\ufeff").encode("utf-8"), encoding, False
    if data.startswith(b"\xef\xbb\xbf"):
        return data[3:], "utf-8-sig", False
    if data.startswith((b"\xff\xfe", b"\xfe\xff")):
        try:
            text = data.decode("utf-16")
        except UnicodeDecodeError as exc:
            raise _file_error(
                label,
                f"starts with a UTF-16 byte-order mark but cannot be decoded as "
                f"UTF-16 (byte {exc.start})",
            ) from None
        notes.append("The file is UTF-16 text (it starts with a byte-order mark).")
        return text.lstrip("\ufeff").encode("utf-8"), "utf-16", False
    if b"\x00" in data[:_SAMPLE_BYTES]:
        raise _file_error(
            label,
            "does not look like a text table (it holds NUL bytes)",
            hint="Fulcrum reads CSV or TSV text, Parquet and Excel .xlsx; for UTF-16 "
            "text without a byte-order mark choose encoding='utf-16'",
        )
    return data, "utf-8", False


def _fallback_cp1252(data: bytes, label: str, notes: list[str]) -> bytes:
    """Re-encode a file that is not valid UTF-8 from Windows-1252, or explain."""
    try:
        data.decode("utf-8")
        where = "somewhere"
    except UnicodeDecodeError as exc:
        where = _row_of_offset(data, exc.start)
    try:
        text = data.decode("cp1252")
    except UnicodeDecodeError:
        raise _file_error(
            label,
            f"is not UTF-8 text (first undecodable byte in {where}) and not Windows-1252 either",
            hint="Save it as UTF-8, or choose its encoding (encoding='...')",
        ) from None
    notes.append(
        f"The file is not valid UTF-8 (first non-UTF-8 byte in {where}); it was read as "
        f"Windows-1252 (cp1252). If accented letters look wrong, choose its encoding."
    )
    return text.encode("utf-8")


# --------------------------------------------------------------------------- text: parsing


def _parse_text(
    data: bytes,
    delimiter: str,
    decimal: str,
    raw_names: list[str],
    include: list[int] | None,
    skip: int,
    label: str,
    as_text: Sequence[int] = (),
):
    """The parsed text as a pyarrow Table (pyarrow reads the header and infers types).

    ``include``: positions of the columns to convert (all when None);
    ``as_text``: positions of columns kept as text whatever they look like.
    """
    import pyarrow as pa
    import pyarrow.csv as pacsv

    buf = pa.py_buffer(data)
    quoted = data.find(b'"') >= 0  # quoted values may hold newlines (slower parse)
    parse = pacsv.ParseOptions(
        delimiter=delimiter,
        quote_char='"',
        double_quote=True,
        newlines_in_values=quoted,
        ignore_empty_lines=True,
    )
    read = pacsv.ReadOptions(use_threads=True, skip_rows=skip)
    keep = None
    unique = len(set(raw_names)) == len(raw_names)
    if include is not None and unique:
        keep = [raw_names[k] for k in include]
    types = {raw_names[k]: pa.string() for k in as_text} if unique else None
    convert = pacsv.ConvertOptions(
        column_types=types,
        null_values=list(MISSING_TEXT),
        strings_can_be_null=True,
        quoted_strings_can_be_null=True,
        decimal_point=decimal,
        include_columns=keep,
    )
    try:
        table = pacsv.read_csv(buf, read_options=read, parse_options=parse, convert_options=convert)
    except pa.ArrowInvalid as exc:
        if "Expected" in str(exc) and "columns" in str(exc):
            _raise_ragged(buf, parse, skip, len(raw_names), label)
        raise _file_error(label, f"could not be read as delimited text ({_reason(exc)})") from None
    if include is not None and keep is None:  # repeated raw (empty) names: select by position
        table = table.select(list(include))
    return table


def _raise_ragged(buf, parse, skip: int, width: int, label: str) -> None:
    """Find every row whose field count differs from the header's and raise."""
    import pyarrow.csv as pacsv

    bad: list[tuple[int, int]] = []

    def handler(row):
        bad.append((row.number, row.actual_columns))
        return "skip"

    parse_opts = pacsv.ParseOptions(
        delimiter=parse.delimiter,
        quote_char='"',
        double_quote=True,
        newlines_in_values=parse.newlines_in_values,
        ignore_empty_lines=True,
        invalid_row_handler=handler,
    )
    read_opts = pacsv.ReadOptions(skip_rows=skip, use_threads=False)
    pacsv.read_csv(buf, read_options=read_opts, parse_options=parse_opts)
    # row.number counts non-empty rows, the header being row 1
    positions = [num - 2 for num, _ in bad if num is not None]
    counts = sorted({c for _, c in bad})
    seen = " or ".join(str(c) for c in counts)
    raise _file_error(
        label,
        f"has rows with {seen} fields where the header has {width}",
        positions,
        hint="Check the delimiter and quoting (a delimiter inside an unquoted value splits it)",
    )


_SEP_LINE = re.compile(r"^\s*sep=(.)\s*$")


def _read_text(
    data: bytes, *, file_name, compression, delimiter, decimal, encoding, columns, notes: list[str]
) -> tuple[pd.DataFrame, ReadInfo]:
    import pyarrow as pa

    label = _label(file_name)
    if not data or data.isspace():
        raise _file_error(label, "is empty (no header and no data rows)")
    utf8, used_encoding, fallback = _to_utf8(data, encoding, label, notes)
    try:
        sample = _decode_sample(utf8)
    except UnicodeDecodeError:
        utf8 = _fallback_cp1252(utf8, label, notes)
        used_encoding, fallback = "cp1252", True
        sample = _decode_sample(utf8)
    if not sample.strip():
        raise _file_error(label, "is empty (no header and no data rows)")

    # a spreadsheet program's "sep=;" first line names the delimiter
    skip = 0
    first, _, rest = sample.lstrip("\r\n").partition("\n")
    sep_line = _SEP_LINE.match(first)
    if sep_line:
        skip = sample[: len(sample) - len(rest)].count("\n")
        sample = rest
        if delimiter is None:
            delimiter = sep_line.group(1)
            notes.append(f"The first line names the delimiter ({first.strip()}).")

    ext = _extension(file_name)
    preferred = "\t" if ext == ".tsv" else ","
    if delimiter is None:
        delim, found = _detect_delimiter(sample, preferred)
        if not found:
            notes.append("Only one column was found; if the file has more, choose its delimiter.")
        elif delim != preferred:
            notes.append(f"Delimiter detected: {_DELIMITER_NAMES[delim]} ({delim!r}).")
    else:
        if len(delimiter) != 1:
            raise InputError("delimiter", f"must be one character, got {delimiter!r}")
        delim = delimiter
    rows = _sample_rows(sample, delim)
    if not rows:
        raise _file_error(label, "is empty (no header and no data rows)")
    if decimal is None:
        dec, thousands = _detect_decimal(rows, delim)
        if dec == ",":
            notes.append(
                "Decimal comma detected (e.g. 0,35 is read as 0.35)"
                + (", with '.' as thousands separator." if thousands else ".")
            )
    else:
        if decimal not in (".", ","):
            raise InputError("decimal", f"must be '.' or ',', got {decimal!r}")
        dec, thousands = decimal, None
        if dec == "," and any(_GROUPED_POINT.match(f.strip()) for r in rows[1:] for f in r):
            thousands = "."
    if dec == delim and utf8.find(b'"') < 0:
        raise InputError(
            "decimal",
            f"is the same character as the delimiter ({delim!r}) and the values are not quoted",
            hint="Choose another delimiter or decimal mark",
        )

    raw_names = list(rows[0])
    names = _clean_names(raw_names, notes)
    _check_duplicates(names)
    include = None
    if columns is not None:
        missing = [c for c in columns if c not in names]
        if missing:
            raise missing_column_error(missing[0], _role(columns, missing[0]), names, delim)
        include = [names.index(c) for c in columns]
    padded = _zero_padded(rows)
    for k in padded:
        notes.append(f"Column {names[k]!r} keeps its leading zeros (read as text, not numbers).")
    table = _parse_text(utf8, delim, dec, raw_names, include, skip, label, padded)
    if any(pa.types.is_binary(f.type) or pa.types.is_large_binary(f.type) for f in table.schema):
        # pyarrow keeps a column whose bytes are not valid UTF-8 as binary
        if fallback or used_encoding != "utf-8":
            raise _file_error(
                label,
                "holds text that is not valid in its encoding",
                hint="Save it as UTF-8, or choose its encoding (encoding='...')",
            )
        utf8 = _fallback_cp1252(utf8, label, notes)
        used_encoding, fallback = "cp1252", True
        table = _parse_text(utf8, delim, dec, raw_names, include, skip, label, padded)
    if table.num_columns != (len(names) if include is None else len(include)):
        raise _file_error(
            label,
            f"has a header of {len(names)} columns that could not be matched to its data",
            hint="Check the delimiter and quoting of the header row",
        )
    frame = table.to_pandas(date_as_object=False)
    frame.columns = names if include is None else [names[k] for k in include]
    if thousands:
        _convert_grouped(frame, dec, thousands)
    if frame.shape[0] == 0:
        raise _file_error(label, "has a header but no data rows")
    fmt = "tsv" if delim == "\t" else "csv"
    info = ReadInfo(
        format=fmt,
        delimiter=delim,
        decimal=dec,
        thousands=thousands,
        encoding=used_encoding,
        compression=compression,
        file_name=file_name,
        n_rows=int(frame.shape[0]),
        encoding_fallback=fallback,
        notes=tuple(notes),
    )
    return frame, info


def _convert_grouped(frame: pd.DataFrame, decimal: str, thousands: str) -> None:
    """Turn text columns of grouped numbers (``1.234,56``) into floats, in place.

    Only a column whose every non-missing value converts is changed; any
    other stays text, and the intake names its unconvertible rows.
    """
    for col in frame.columns:
        ser = frame[col]
        if not (pd.api.types.is_string_dtype(ser.dtype) or ser.dtype == object):
            continue
        num = text_to_number(ser, decimal, thousands)
        if num.notna().sum() == ser.notna().sum():
            frame[col] = num


def text_to_number(ser: pd.Series, decimal: str = ".", thousands: str | None = None) -> pd.Series:
    """Text as float64 (NaN where it is not a number), honouring decimal and thousands marks."""
    txt = ser.astype("str").str.strip()
    if thousands:
        txt = txt.str.replace(thousands, "", regex=False)
    if decimal != ".":
        txt = txt.str.replace(decimal, ".", regex=False)
    return pd.to_numeric(txt, errors="coerce").astype(np.float64)


# --------------------------------------------------------------------------- parquet


def _read_parquet(data: bytes, *, file_name, columns, notes) -> tuple[pd.DataFrame, ReadInfo]:
    import pyarrow as pa
    import pyarrow.parquet as pq

    label = _label(file_name)
    try:
        pf = pq.ParquetFile(pa.BufferReader(data))
    except (pa.ArrowInvalid, OSError) as exc:
        raise _file_error(label, f"could not be read as Parquet ({_reason(exc)})") from None
    schema_names = list(pf.schema_arrow.names)
    _check_duplicates([str(n) for n in schema_names])
    if columns is not None:
        missing = [c for c in columns if c not in schema_names]
        if missing:
            raise missing_column_error(missing[0], _role(columns, missing[0]), schema_names)
    try:  # a damaged page shows only when it is read
        table = pf.read(columns=list(columns) if columns is not None else None)
        frame = table.to_pandas(date_as_object=False)
    except Exception as exc:  # noqa: BLE001 -- any failure of the library on these bytes
        raise _file_error(label, f"could not be read as Parquet ({_reason(exc)})") from None
    float32 = tuple(str(f.name) for f in table.schema if pa.types.is_float32(f.type))
    if not isinstance(frame.index, pd.RangeIndex):
        frame = frame.reset_index()
    frame.columns = _clean_names(list(frame.columns), notes)
    _check_duplicates(list(frame.columns))
    if frame.shape[1] == 0:
        raise _file_error(label, "is empty (no columns)")
    if frame.shape[0] == 0:
        raise _file_error(label, "has a header but no data rows")
    info = ReadInfo(
        format="parquet",
        file_name=file_name,
        n_rows=int(frame.shape[0]),
        float32_columns=float32,
        notes=tuple(notes),
    )
    return frame, info


# --------------------------------------------------------------------------- excel


def _pick_sheet(names: list[str], sheet) -> str:
    if sheet is None or sheet == "":
        return names[0]
    if isinstance(sheet, (int, np.integer)) and not isinstance(sheet, bool):
        if 0 <= int(sheet) < len(names):
            return names[int(sheet)]
        raise InputError(
            "sheet",
            f"number {int(sheet)} is out of range; the workbook has "
            f"{len(names)} sheet(s): {_quote_list(names)}",
        )
    want = str(sheet)
    if want in names:
        return want
    folded = [n for n in names if n.casefold() == want.strip().casefold()]
    if len(folded) == 1:
        return folded[0]
    raise InputError(
        "sheet", f"the workbook has no sheet named {want!r}; its sheets are {_quote_list(names)}"
    )


def _is_formula(value) -> bool:
    if isinstance(value, str):
        return value.startswith("=")
    return type(value).__name__ in ("ArrayFormula", "DataTableFormula")


def _not_a_workbook(label: str, exc: BaseException) -> InputError:
    return _file_error(
        label,
        f"is a ZIP archive but not an Excel workbook Fulcrum can read ({_reason(exc)})",
        hint="Fulcrum reads Excel .xlsx, CSV, TSV and Parquet",
    )


def _read_excel(data: bytes, *, file_name, sheet, columns, notes) -> tuple[pd.DataFrame, ReadInfo]:
    import openpyxl

    label = _label(file_name)
    try:
        wb = openpyxl.load_workbook(io.BytesIO(data), read_only=True, data_only=True)
    except Exception as exc:  # noqa: BLE001 -- any failure of the library on these bytes
        raise _not_a_workbook(label, exc) from None
    try:
        names = [ws.title for ws in wb.worksheets]  # chart sheets hold no table
        if not names:
            raise _file_error(label, "has no worksheet")
        chosen = _pick_sheet(names, sheet)
        ws = wb[chosen]
        ws.reset_dimensions()  # do not trust the stored sheet size: read every row there is
        try:  # read-only workbooks unpack each sheet only now
            rows = list(ws.iter_rows(values_only=True))
        except Exception as exc:  # noqa: BLE001
            raise _not_a_workbook(label, exc) from None
    finally:
        wb.close()
    # trailing empty rows and columns are formatting, not data
    while rows and all(v is None for v in rows[-1]):
        rows.pop()
    if not rows:
        raise _file_error(label, f"has nothing in sheet {chosen!r} (no header and no data rows)")
    width = (
        max(
            (max((k for k, v in enumerate(r) if v is not None), default=-1) for r in rows),
            default=-1,
        )
        + 1
    )
    header = list(rows[0]) + [None] * (width - len(rows[0]))
    names_clean = _clean_names(header[:width], notes)
    _check_duplicates(names_clean)
    if columns is not None:
        missing = [c for c in columns if c not in names_clean]
        if missing:
            raise missing_column_error(missing[0], _role(columns, missing[0]), names_clean)
    body = rows[1:]
    if not body:
        raise _file_error(label, f"has a header but no data rows in sheet {chosen!r}")
    pad = [None] * width
    cols = list(zip(*[(tuple(r) + tuple(pad))[:width] for r in body]))
    keep = range(width) if columns is None else [names_clean.index(c) for c in columns]
    frame = pd.DataFrame({names_clean[k]: pd.Series(list(cols[k])) for k in keep})

    formula_cells: dict[str, tuple[int, ...]] = {}
    if frame.isna().to_numpy().any():
        wb2 = openpyxl.load_workbook(io.BytesIO(data), read_only=True, data_only=False)
        try:
            ws2 = wb2[chosen]
            ws2.reset_dimensions()
            frows = list(ws2.iter_rows(min_row=2, max_row=len(rows), values_only=True))
        finally:
            wb2.close()
        for k in keep:
            pos = tuple(
                i
                for i, r in enumerate(frows)
                if k < len(r) and cols[k][i] is None and _is_formula(r[k])
            )
            if pos:
                formula_cells[names_clean[k]] = pos
        if formula_cells:
            total = sum(len(p) for p in formula_cells.values())
            notes.append(
                f"{total:,} formula cell(s) have no saved result (in "
                f"{_quote_list(formula_cells)}); they are not read as empty."
            )
    if len(names) > 1:
        notes.append(f"Read sheet {chosen!r} of {len(names)} ({_quote_list(names)}).")
    info = ReadInfo(
        format="excel",
        sheet=chosen,
        sheet_names=tuple(names),
        file_name=file_name,
        n_rows=int(frame.shape[0]),
        formula_cells=formula_cells,
        notes=tuple(notes),
    )
    return frame, info


# --------------------------------------------------------------------------- entry point


def read_table(
    source,
    *,
    file_name: str | None = None,
    sheet=None,
    delimiter: str | None = None,
    decimal: str | None = None,
    encoding: str | None = None,
    columns: Sequence[str] | None = None,
) -> RawTable:
    """Read a CSV, TSV, Parquet or Excel file into a :class:`RawTable`, in memory.

    Parameters
    ----------
    source : path, bytes or binary file-like object
        The file. Its bytes are read into memory; nothing is written to disk.
    file_name : str, optional
        The file's name (for an upload given as bytes); its extension helps
        choose the format and it appears in messages.
    sheet : str or int, optional
        Excel: the sheet to read (name, or 0-based position); default the first.
    delimiter : str, optional
        Text: the field delimiter; detected when not given.
    decimal : {".", ","}, optional
        Text: the decimal mark; detected when not given.
    encoding : str, optional
        Text: the encoding; UTF-8 (with or without byte-order mark) by default.
    columns : sequence of str, optional
        Read only these columns (all when None). A dict ``{column: role}``
        works too; the role then names the column in the error when the file
        lacks it ("is mapped as the label but is not a column of the file").

    The format is recognised from the content (Parquet, ZIP/xlsx and gzip
    signatures), otherwise the file is read as delimited text.

    Raises
    ------
    InputError
        An empty or header-only file, duplicate column names, rows with the
        wrong number of fields, an unknown sheet, an undecodable encoding, an
        old ``.xls`` workbook; the message names the file and what to change.
    """
    data, name = _source_bytes(source, file_name)
    label = _label(name)
    notes: list[str] = []
    compression = None
    if data.startswith(_MAGIC_GZIP):
        try:
            data = gzip.decompress(data)
        except (OSError, EOFError, zlib.error) as exc:
            raise _file_error(
                label, f"looks gzip-compressed but cannot be decompressed ({_reason(exc)})"
            ) from None
        compression = "gzip"
    if not data:
        raise _file_error(label, "is empty (no header and no data rows)")
    ext = _extension(name)
    ignored = []
    if data.startswith(_MAGIC_PARQUET):
        fmt = "parquet"
    elif data.startswith(_MAGIC_ZIP):
        fmt = "excel"
    elif data.startswith(_MAGIC_OLE):
        raise _file_error(
            label,
            "is an old Excel 97-2003 workbook (.xls), which Fulcrum does not read",
            hint="Save it as .xlsx or CSV",
        )
    else:
        fmt = "text"
        if ext in (".parquet", ".xlsx", ".xlsm"):
            raise _file_error(
                label,
                f"has the extension {ext} but its content is not a "
                f"{'Parquet' if ext == '.parquet' else 'Excel'} file",
            )
    if fmt != "text":
        ignored = [
            n
            for n, v in (("delimiter", delimiter), ("decimal", decimal), ("encoding", encoding))
            if v is not None
        ]
    if fmt != "excel" and sheet not in (None, ""):
        ignored.append("sheet")
    if ignored:
        notes.append(
            f"Ignored for a {({'parquet': 'Parquet', 'text': 'text'}).get(fmt, 'Excel')} "
            f"file: {', '.join(ignored)}."
        )
    if fmt == "parquet":
        frame, info = _read_parquet(data, file_name=name, columns=columns, notes=notes)
    elif fmt == "excel":
        frame, info = _read_excel(data, file_name=name, sheet=sheet, columns=columns, notes=notes)
    else:
        frame, info = _read_text(
            data,
            file_name=name,
            compression=compression,
            delimiter=delimiter,
            decimal=decimal,
            encoding=encoding,
            columns=columns,
            notes=notes,
        )
    if compression and info.compression is None:
        info = ReadInfo(**{**info.__dict__, "compression": compression})
    return RawTable(frame=frame, info=info)
