"""Files larger than memory: DuckDB reduces a Parquet or CSV file to a count table.

:func:`reduce_file` reads a file of scored cases with DuckDB (embedded,
in-process, no server) and returns the count-table
:class:`~core.dataset.Dataset` (``kind="counts"``) that every later step
takes: one row per distinct score (or per coarsened score) and group, with
the events and non-events there -- the weight sums and squared-weight sums
for weighted rows, the events' summed case cost when there is one. The
file's rows never enter Python: DuckDB streams them through three passes
with bounded memory.

1. **Checks** -- one aggregate pass gives, per label value, every count the
   row-level intake (:func:`core.intake.load_dataset`) checks: scores that
   are missing, not numbers or infinite, missing labels, weights and case
   costs that are not numbers, missing, infinite or negative, missing group
   values. A problem raises the same :class:`~core.errors.InputError` as the
   row-level intake gives for the same file -- the same column, problem,
   number of rows, first 1-based data rows and examples (a targeted query
   finds those) -- and the same warnings are issued.
2. **Counts** -- the statement of :func:`core.sql.reduction_sql` (the one
   Fulcrum prints for other engines) runs on the file.
3. **Rounding** (only with ``decimals``) -- the exact second pass of
   :func:`core.sql.rounding_check_sql` measures the largest effect of the
   coarsening on the counts (see :class:`RoundingEffect`).

Engine settings: ``memory_limit`` (default 1GB), ``threads`` (default 2) and
a temporary directory created for this call alone (``tempfile.mkdtemp``,
private to the user, mode 0700) where DuckDB may spill; it is deleted when
the call ends, also on error. No extension is installed or loaded from
outside.

CSV files are read as text (UTF-8, optionally gzip-compressed) with the
delimiter and decimal mark detected as :mod:`core.reading` detects them, and
converted to numbers as the row-level intake converts them; a label or group
column's distinct values are typed by :func:`core.reading.read_table` itself,
so labels and group values compare as they do row by row. Parquet columns
keep their types.

What a count table cannot carry (clusters, times, per-case calibration) is
not read here; load the rows for those.
"""

from __future__ import annotations

import csv
import gzip
import io
import os
import re
import shutil
import tempfile
import threading
import time
from dataclasses import asdict, dataclass, field, replace
from pathlib import Path
from types import SimpleNamespace

import numpy as np
import pandas as pd

from core.dataset import Dataset, IntakeWarning, Mapping
from core.errors import InputError, format_rows
from core.fingerprint import text_codes, value_text
from core.intake import (
    _check_mapping,
    _label_codes,
    _match_positive,
    _n,
    _not_numbers_error,
    _v,
    _value_list,
    _warn_few_events,
    _warn_float32,
    mapped_columns,
)
from core.reading import (
    MISSING_TEXT,
    _check_duplicates,
    _clean_names,
    _detect_decimal,
    _detect_delimiter,
    _sample_rows,
    missing_column_error,
    read_table,
)
from core.sql import (
    MAX_GRID_INDEX,
    Relation,
    _check_decimals,
    quote_identifier,
    quote_literal,
    reduction_sql,
    rounding_check_sql,
)

__all__ = ["Reduction", "RoundingEffect", "file_columns", "reduce_file", "reduction_of"]

_SAMPLE_BYTES = 1 << 16
_SHOW_DROPPED = 100
_ROW = "fulcrum_row"
# white space around a value (RE2 classes: ASCII, vertical tab, NEL, Unicode separators);
# regular expressions are cheaper in DuckDB than trim() with a character set
_WS = r"[\s\x{0B}\x{85}\p{Z}]*"
_NUMERIC_TYPES = ("TINYINT", "SMALLINT", "INTEGER", "BIGINT", "HUGEINT", "UTINYINT", "USMALLINT",
                  "UINTEGER", "UBIGINT", "UHUGEINT", "FLOAT", "DOUBLE")
_TIME_TYPES = ("DATE", "TIME", "TIMESTAMP", "INTERVAL")
# the number shapes pandas.to_numeric reads (DuckDB's cast alone would also take 1_000)
_NUMBER_RE = "(?i)^" + _WS + r"[+-]?((\d+\.?\d*|\.\d+)(e[+-]?\d+)?|inf|infinity)" + _WS + "$"
# the missing-value words (and nothing but white space), as the intake reads them
_MISSING_RE = ("^" + _WS + "(" + "|".join(re.escape(w) for w in MISSING_TEXT if w) + ")?"
               + _WS + "$")


# =========================================================================== descriptions


@dataclass(frozen=True)
class RoundingEffect:
    """What coarsening the scores to ``decimals`` decimals did, from an exact second pass.

    Scores move to the grid of multiples of ``grid_step`` = 10^-decimals
    toward the non-flagged side (``direction``: ``"floor"`` when higher is
    riskier, ``"ceil"`` when lower is). At every grid threshold the coarse
    counts equal the row-level counts exactly. At a threshold strictly
    between two grid values the coarse table counts the flags of the grid
    value on the non-flagged side, so it flags fewer cases than the rows
    would -- never more -- by at most the rows whose raw score lies strictly
    inside that grid step:

    * ``max_events_off_grid`` -- the largest shortfall of the flagged events
      (true positives) at any threshold: the most events in one grid cell
      whose raw score is not the cell's grid value;
    * ``max_non_events_off_grid`` -- the same for the flagged non-events
      (false positives);
    * ``max_rows_off_grid`` -- the same for all flagged rows.

    Counts are weight sums for weighted rows. ``rows_off_grid`` is the total
    over all cells; ``coarse_values`` and ``raw_scores`` count the distinct
    coarse and raw scores (the points of the coarse and of the exact curve)
    and ``max_raw_per_coarse`` the most raw scores merged into one.
    """

    decimals: int
    direction: str
    grid_step: float
    coarse_values: int
    raw_scores: int
    max_raw_per_coarse: int
    max_events_off_grid: float
    max_non_events_off_grid: float
    max_rows_off_grid: float
    rows_off_grid: float
    weighted: bool
    sql: str

    def statement(self) -> str:
        """One plain sentence for the memo."""
        unit = " (weighted)" if self.weighted else ""
        side = "down" if self.direction == "floor" else "up"
        nxt = "above" if self.direction == "floor" else "below"
        step = f"{self.grid_step:.{self.decimals}f}"
        if self.rows_off_grid == 0:
            effect = ("every raw score already lay on that grid, so the counts are exact at every "
                      "threshold")
        else:
            effect = (f"between grid values they are those of the next grid value {nxt}, which "
                      f"flags up to {_num(self.max_events_off_grid)} fewer events and "
                      f"{_num(self.max_non_events_off_grid)} fewer non-events{unit} than the rows "
                      f"would (the most rows with a raw score strictly inside one grid step)")
        return (f"Scores were rounded {side} to {self.decimals} decimal"
                f"{'' if self.decimals == 1 else 's'} (toward the non-flagged side) before "
                f"counting: at every threshold on the {step} grid the counts equal the row-level "
                f"counts exactly; {effect}. {self.coarse_values:,} coarse scores stand for "
                f"{self.raw_scores:,} distinct raw scores (at most {self.max_raw_per_coarse:,} "
                f"in one).")

    def to_dict(self) -> dict:
        return asdict(self)


@dataclass(frozen=True)
class Reduction:
    """How a file was reduced to the count table: the statement run and what it read.

    ``sql`` is the statement of :func:`core.sql.reduction_sql` exactly as run
    (its FROM item reads the file and converts text to numbers); ``rounding``
    is None when every distinct score was kept. ``label``, ``positive_label``
    (the event value as found in the file), ``weight``, ``weight_kind`` and
    ``case_cost`` name the source columns the counts came from.
    """

    engine: str
    source_format: str
    sql: str
    rows_read: int
    rows_used: int
    table_rows: int
    label: str
    positive_label: object
    weight: str | None
    weight_kind: str | None
    case_cost: str | None
    decimals: int | None
    rounding: RoundingEffect | None
    memory_limit: str
    threads: int
    seconds: float
    notes: tuple[str, ...] = field(default=())

    def statement(self) -> str:
        """Plain sentences for the memo: what was read, and the rounding."""
        head = (f"Reduced with {self.engine} ({self.source_format}, memory limit "
                f"{self.memory_limit}, {self.threads} thread{'' if self.threads == 1 else 's'}): "
                f"{self.rows_read:,} rows read, {self.rows_used:,} counted, "
                f"{self.table_rows:,} count-table rows.")
        if self.rounding is None:
            return (head + " Every distinct score was kept, so the count table gives exactly the "
                           "row-level counts at every threshold.")
        return head + " " + self.rounding.statement()

    def to_dict(self) -> dict:
        d = asdict(self)
        d["rounding"] = None if self.rounding is None else self.rounding.to_dict()
        pl = d["positive_label"]
        if isinstance(pl, np.generic):
            d["positive_label"] = pl.item()
        d["notes"] = list(self.notes)
        return d


def reduction_of(ds: Dataset) -> Reduction | None:
    """The :class:`Reduction` of a dataset built by :func:`reduce_file` (None otherwise).

    The same as ``ds.reduction`` (the :class:`~core.dataset.Dataset` field).
    """
    return getattr(ds, "reduction", None)


def file_columns(path, *, delimiter: str | None = None, decimal: str | None = None,
                 memory_limit: str = "256MB") -> list[str]:
    """The column names :func:`reduce_file` sees in a Parquet or CSV file, without reading rows.

    Parquet: from the file's schema; CSV: from its header (delimiter detected
    as :func:`reduce_file` detects it). Names are cleaned as the intake
    cleans them (surrounding white space, blanks). For a mapping form before
    the reduction runs.
    """
    with _Engine(memory_limit, 1, None, None) as engine:
        return list(_open_source(path, engine, delimiter=delimiter, decimal=decimal).names)


def _num(x: float) -> str:
    x = float(x)
    return f"{x:,.0f}" if x.is_integer() else f"{x:,.6g}"


# =========================================================================== engine


class _Engine:
    """A DuckDB connection with our limits and a private spill directory (a context manager)."""

    def __init__(self, memory_limit: str, threads: int, temp_parent: str | None, progress):
        import duckdb

        if isinstance(threads, bool) or not isinstance(threads, (int, np.integer)) or threads < 1:
            raise InputError("threads", f"must be a whole number of at least 1, got {threads!r}")
        self.tmp = tempfile.mkdtemp(prefix="fulcrum-reduce-", dir=temp_parent)  # mode 0700
        try:
            self.con = duckdb.connect(":memory:", config={
                "memory_limit": str(memory_limit),
                "threads": int(threads),
                "temp_directory": os.path.join(self.tmp, "spill"),
                "autoinstall_known_extensions": False,
                "autoload_known_extensions": False,
            })
            self.con.execute("SET enable_progress_bar = true")
            self.con.execute("SET enable_progress_bar_print = false")
        except Exception as exc:
            shutil.rmtree(self.tmp, ignore_errors=True)
            if isinstance(exc, duckdb.Error):
                raise InputError("memory_limit", f"DuckDB refused the settings ({exc})") from None
            raise
        self.version = duckdb.__version__
        self.error = duckdb.Error
        self.progress = progress
        self.done = 0.0
        self.share = 1.0

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        try:
            self.con.close()
        finally:
            shutil.rmtree(self.tmp, ignore_errors=True)

    def query(self, sql: str, params=None, *, stage: str | None = None, label: str = "The file"):
        """Run ``sql`` and return its result as a pyarrow Table.

        With a ``stage``, the query runs in a worker thread while this thread
        reports DuckDB's progress (so the caller's progress callback runs in
        the caller's thread); Ctrl-C interrupts the query.
        """
        box: dict = {}

        def work():
            try:
                box["table"] = _arrow(self.con.sql(sql, params=params))
            except BaseException as exc:  # noqa: BLE001 - re-raised in the calling thread
                box["error"] = exc

        if stage is None or self.progress is None:
            work()
        else:
            worker = threading.Thread(target=work, name="fulcrum-duckdb", daemon=True)
            worker.start()
            try:
                while worker.is_alive():
                    worker.join(0.2)
                    p = self.con.query_progress()
                    if p >= 0:
                        self.progress(min(1.0, self.done + self.share * p / 100.0), stage)
            except KeyboardInterrupt:
                self.con.interrupt()
                worker.join()
                raise
            self.done += self.share
            self.progress(min(1.0, self.done), stage)
        if "error" in box:
            exc = box["error"]
            if isinstance(exc, self.error):
                raise InputError(None, f"{label} could not be reduced: {_first_line(exc)}") from None
            raise exc
        return box["table"]


def _arrow(rel):
    """A DuckDB relation's result as a pyarrow Table (DuckDB 1.x and 2.x)."""
    if rel is None:
        import pyarrow as pa

        return pa.table({})
    fetch = getattr(rel, "to_arrow_table", None)
    out = fetch() if fetch is not None else rel.arrow()
    return out.read_all() if hasattr(out, "read_all") else out


def _first_line(exc) -> str:
    text = str(exc).strip()
    return text.splitlines()[0] if text else type(exc).__name__


# =========================================================================== source


@dataclass
class _Source:
    format: str
    label: str  # the file's name, for messages
    raw: str  # FROM item: the file's columns
    numbered: str  # FROM item: the file's columns and fulcrum_row (0-based)
    names: list[str]  # cleaned column names, in order
    raw_name: dict  # cleaned name -> name in the file
    types: dict  # cleaned name -> DuckDB type
    decimal: str = "."
    thousands: str | None = None
    delimiter: str | None = None
    notes: list = field(default_factory=list)

    @property
    def info(self):
        """What the intake's message helpers read of a ReadInfo."""
        return SimpleNamespace(format=self.format, decimal=self.decimal)

    def col(self, name: str) -> str:
        return quote_identifier(self.raw_name[name], "duckdb")


def _open_source(path, engine: _Engine, *, delimiter, decimal) -> _Source:
    p = Path(path)
    if not p.is_file():
        raise InputError(str(p), "no such file")
    label = p.name
    with open(p, "rb") as fh:
        head = fh.read(4)
    if head == b"PAR1":
        return _parquet_source(p, label, engine)
    if head[:2] == b"PK" or head == b"\xd0\xcf\x11\xe0":
        raise InputError(None, f"{label} is a spreadsheet; a file reduced here must be Parquet or "
                               f"CSV (save the sheet as CSV, or load it row by row)")
    return _csv_source(p, label, engine, delimiter=delimiter, decimal=decimal,
                       gz=head[:2] == b"\x1f\x8b")


def _parquet_source(p: Path, label: str, engine: _Engine) -> _Source:
    raw = f"read_parquet({quote_literal(str(p), 'duckdb')})"
    try:
        desc = _arrow(engine.con.sql(f"DESCRIBE SELECT * FROM {raw}")).to_pylist()
    except engine.error as exc:
        raise InputError(None, f"{label} could not be read as Parquet ({_first_line(exc)})") from None
    file_names = [str(r["column_name"]) for r in desc]
    _check_duplicates(file_names)
    notes: list[str] = []
    names = _clean_names(file_names, notes)
    _check_duplicates(names)
    types = {n: str(r["column_type"]) for n, r in zip(names, desc)}
    raw_name = dict(zip(names, file_names))
    numbered = (f"(SELECT file_row_number AS {quote_identifier(_ROW, 'duckdb')}, * EXCLUDE "
                f"(file_row_number) FROM read_parquet({quote_literal(str(p), 'duckdb')}, "
                f"file_row_number = true)) AS src")
    if _ROW in names or "file_row_number" in names:
        raise InputError(_ROW if _ROW in names else "file_row_number",
                         "is a column name the reduction uses for itself; rename it")
    return _Source("parquet", label, raw, numbered, names, raw_name, types, notes=notes)


def _csv_sample(p: Path, gz: bool, label: str) -> str:
    opener = gzip.open if gz else open
    try:
        with opener(p, "rb") as fh:
            data = fh.read(_SAMPLE_BYTES + 4)
    except (OSError, EOFError) as exc:
        raise InputError(None, f"{label} looks gzip-compressed but cannot be decompressed "
                               f"({exc})") from None
    if data.startswith((b"\xff\xfe", b"\xfe\xff")):
        raise InputError(None, f"{label} is UTF-16 text; a file reduced here must be UTF-8",
                         hint="Save it as UTF-8 or Parquet, or load it row by row")
    if b"\x00" in data:
        raise InputError(None, f"{label} does not look like a text table (it holds NUL bytes)",
                         hint="Fulcrum reduces CSV / TSV text in UTF-8 and Parquet")
    if data.startswith(b"\xef\xbb\xbf"):
        data = data[3:]
    cut = data[:_SAMPLE_BYTES]
    if len(data) > _SAMPLE_BYTES:
        last = cut.rfind(b"\n")
        if last > 0:
            cut = cut[: last + 1]
    try:
        return cut.decode("utf-8")
    except UnicodeDecodeError as exc:
        row = cut.count(b"\n", 0, exc.start)
        where = "the header" if row == 0 else f"data row {row}"
        raise InputError(None, f"{label} is not UTF-8 text (first undecodable byte in {where}); "
                               f"a file reduced here must be UTF-8",
                         hint="Save it as UTF-8 or Parquet, or load it row by row") from None


def _csv_source(p: Path, label: str, engine: _Engine, *, delimiter, decimal, gz: bool) -> _Source:
    sample = _csv_sample(p, gz, label)
    if not sample.strip():
        raise InputError(None, f"{label} is empty (no header and no data rows)")
    notes: list[str] = []
    skip = 0
    first, _, rest = sample.lstrip("\r\n").partition("\n")
    sep_line = re.match(r"^\s*sep=(.)\s*$", first)
    if sep_line:
        skip = sample[: len(sample) - len(rest)].count("\n")
        sample = rest
        if delimiter is None:
            delimiter = sep_line.group(1)
            notes.append(f"The first line names the delimiter ({first.strip()}).")
    name = p.name.lower().removesuffix(".gz")
    preferred = "\t" if name.endswith(".tsv") else ","
    if delimiter is None:
        delim, found = _detect_delimiter(sample, preferred)
        if not found:
            notes.append("Only one column was found; if the file has more, choose its delimiter.")
    else:
        if not isinstance(delimiter, str) or len(delimiter) != 1:
            raise InputError("delimiter", f"must be one character, got {delimiter!r}")
        delim = delimiter
    rows = _sample_rows(sample, delim)
    if not rows:
        raise InputError(None, f"{label} is empty (no header and no data rows)")
    if decimal is None:
        dec, thousands = _detect_decimal(rows, delim)
        if dec == ",":
            notes.append("Decimal comma detected (e.g. 0,35 is read as 0.35)"
                         + (", with '.' as thousands separator." if thousands else "."))
    else:
        if decimal not in (".", ","):
            raise InputError("decimal", f"must be '.' or ',', got {decimal!r}")
        dec, thousands = decimal, None
        if dec == "," and any(re.match(r"^[+-]?\d{1,3}(\.\d{3})+(,\d+)?$", f.strip())
                              for r in rows[1:] for f in r):
            thousands = "."
    raw_names = list(rows[0])
    names = _clean_names(raw_names, notes)
    _check_duplicates(names)
    if _ROW in names:
        raise InputError(_ROW, "is a column name the reduction uses for itself; rename it")
    def q(v):
        return quote_literal(v, "duckdb")

    cols = "{" + ", ".join(f"{q(n)}: 'VARCHAR'" for n in names) + "}"
    opts = (f"delim = {q(delim)}, quote = '\"', escape = '\"', header = true, "
            f"auto_detect = false, columns = {cols}, skip = {skip}, "
            f"compression = {q('gzip' if gz else 'none')}, encoding = 'utf-8'")
    raw = f"read_csv({q(str(p))}, {opts})"
    numbered = (f"(SELECT row_number() OVER () - 1 AS {quote_identifier(_ROW, 'duckdb')}, * "
                f"FROM {raw}) AS src")
    types = {n: "VARCHAR" for n in names}
    fmt = "tsv" if delim == "\t" else "csv"
    return _Source(fmt, label, raw, numbered, names, dict(zip(names, names)), types,
                   decimal=dec, thousands=thousands, delimiter=delim, notes=notes)


# =========================================================================== column expressions


@dataclass
class _Num:
    """SQL of one numeric column: value (DOUBLE), missing, not a number, infinite."""

    value: str
    missing: str
    not_number: str
    infinite: str
    kind: str  # "number", "text", "time", "other"
    text: str  # the raw value as text (for examples)


def _missing_sql(c: str, typ: str) -> str:
    """Where a value counts as missing: NULL, NaN, or (text) a missing-value word."""
    if typ == "VARCHAR":
        return f"({c} IS NULL OR regexp_full_match({c}, {quote_literal(_MISSING_RE, 'duckdb')}))"
    if typ in ("FLOAT", "DOUBLE"):
        return f"({c} IS NULL OR isnan({c}))"
    return f"({c} IS NULL)"


def _num_sql(src: _Source, name: str) -> _Num:
    c = src.col(name)
    typ = src.types[name]
    base = typ.split("(")[0]
    if base in _NUMERIC_TYPES or base == "DECIMAL" or base == "BOOLEAN":
        v = f"CAST({c} AS DOUBLE)"
        return _Num(v, _missing_sql(c, typ), "FALSE", f"COALESCE(isinf({v}), FALSE)", "number",
                    f"CAST({c} AS VARCHAR)")
    if typ == "VARCHAR":
        t = c  # DuckDB's cast skips surrounding white space itself
        if src.thousands:
            t = f"replace({t}, {quote_literal(src.thousands, 'duckdb')}, '')"
        if src.decimal != ".":
            t = f"replace({t}, {quote_literal(src.decimal, 'duckdb')}, '.')"
        v = (f"(CASE WHEN regexp_full_match({t}, {quote_literal(_NUMBER_RE, 'duckdb')}) "
             f"THEN TRY_CAST({t} AS DOUBLE) END)")
        # a number is never missing: the words are looked for only where no number was read
        miss = (f"({c} IS NULL OR ({v} IS NULL AND "
                f"regexp_full_match({c}, {quote_literal(_MISSING_RE, 'duckdb')})))")
        return _Num(v, miss, f"(NOT {miss} AND {v} IS NULL)", f"COALESCE(isinf({v}), FALSE)",
                    "text", c)
    miss = f"({c} IS NULL)"
    kind = "time" if base.startswith(_TIME_TYPES) else "other"
    return _Num("CAST(NULL AS DOUBLE)", miss, f"(NOT {miss})", "FALSE", kind,
                f"CAST({c} AS VARCHAR)")


# =========================================================================== positions


def _virtual_positions(first, count: int) -> np.ndarray:
    """0-based positions: ``count`` of them, of which only the first few are known.

    :class:`~core.errors.InputError` and :func:`~core.errors.format_rows` read
    only an array's size and its first entries; ``np.empty`` leaves the rest
    uncommitted, so even millions of bad rows cost no memory.
    """
    pos = np.empty(int(count), dtype=np.int64)
    k = min(len(first), pos.size)
    pos[:k] = np.asarray(first[:k], dtype=np.int64)
    return pos


class _Rows:
    """Counts and first positions of the rows where a condition holds, from DuckDB."""

    def __init__(self, engine: _Engine, src: _Source, keep: str):
        self.engine, self.src, self.keep = engine, src, keep

    def where(self, cond: str, *, kept: bool = True, show: int = 5) -> np.ndarray:
        full = f"({self.keep}) AND ({cond})" if kept else cond
        r = self.engine.query(
            f"SELECT count(*) AS n, min({quote_identifier(_ROW, 'duckdb')}, {int(show)}) AS first "
            f"FROM {self.src.numbered} WHERE {full}", label=self.src.label).to_pylist()[0]
        return _virtual_positions(sorted(r["first"] or []), r["n"])

    def examples(self, text_sql: str, cond: str, *, kept: bool = True) -> pd.Series:
        """The first 50 distinct values (as text) where ``cond`` holds, in order of appearance."""
        full = f"({self.keep}) AND ({cond})" if kept else cond
        row = quote_identifier(_ROW, "duckdb")
        tab = self.engine.query(
            f"SELECT v FROM (SELECT {text_sql} AS v, min({row}) AS f FROM {self.src.numbered} "
            f"WHERE {full} GROUP BY v) ORDER BY f LIMIT 50", label=self.src.label)
        return pd.Series(tab.column("v").to_pylist(), dtype=object)


def _not_numbers(rows: _Rows, col: str, num: _Num, pos: np.ndarray, *, kept: bool) -> InputError:
    if num.kind == "time":
        ser = pd.Series(np.empty(0, dtype="datetime64[ns]"))
        return _not_numbers_error(col, ser, pos, np.zeros(0, dtype=bool), rows.src.info)
    ser = rows.examples(num.text, num.not_number, kept=kept)
    return _not_numbers_error(col, ser, pos, np.ones(ser.shape[0], dtype=bool), rows.src.info)


# =========================================================================== typing distinct values


def _typed_distinct(src: _Source, name: str, values: list):
    """The distinct raw values of a column as the row-level intake would type them.

    Parquet values keep their type (through pyarrow and pandas as the intake
    reads them); CSV text is typed by :func:`core.reading.read_table` on a
    small table of just these values.
    """
    if src.format == "parquet":
        return pd.Series(values, dtype=object) if not values else _as_pandas(values)
    if not values:
        return pd.Series([], dtype=object)
    # a second column keeps a row whose value is empty from being a blank (skipped) line
    buf = io.StringIO()
    w = csv.writer(buf, delimiter=";", lineterminator="\n", quoting=csv.QUOTE_MINIMAL)
    w.writerow(["v", "i"])
    for i, v in enumerate(values):
        w.writerow(["" if v is None else v, i])
    table = read_table(buf.getvalue().encode("utf-8"), file_name="values.csv", delimiter=";",
                       decimal=src.decimal)
    ser = table.frame["v"]
    if ser.shape[0] != len(values):  # a value the tiny table could not keep apart: keep the text
        return pd.Series(values, dtype=object)
    return ser.reset_index(drop=True)


def _as_pandas(values: list) -> pd.Series:
    import pyarrow as pa

    try:
        return pa.array(values).to_pandas()
    except (pa.ArrowInvalid, pa.ArrowTypeError):
        return pd.Series(values, dtype=object)


# =========================================================================== the call


def reduce_file(path, *, score: str, label: str | None = None, positive=None,
                weight: str | None = None, weight_kind: str | None = None,
                case_cost: str | None = None, groups=(), higher_is_riskier: bool = True,
                drop_missing_scores: bool = False, decimals: int | None = None,
                delimiter: str | None = None, decimal: str | None = None,
                memory_limit: str = "1GB", threads: int = 2, check_rounding: bool = True,
                temp_dir: str | None = None, progress=None,
                default_positive: bool = False) -> Dataset:
    """Reduce a Parquet or CSV file of scored cases to a count-table Dataset, out of memory.

    Parameters
    ----------
    path : str or path-like
        A Parquet file, or a CSV / TSV file (UTF-8, optionally gzip).
    score, label, positive, weight, weight_kind, case_cost, groups, higher_is_riskier, \
drop_missing_scores
        As in :class:`~core.dataset.Mapping` for rows (``positive`` is the
        ``positive_label``, matched to the label's values as the intake
        matches it). ``weight_kind`` is required with a weight: for
        ``"sampling"`` weights the squared-weight sums are kept
        (``events_sq`` / ``non_events_sq``), for ``"frequency"`` weights not.
    decimals : int, optional
        Coarsen the scores to this many decimals toward the non-flagged side
        (floor when higher is riskier, ceil when lower is) before counting,
        so the table has at most one row per grid value and group; the
        counts at every grid threshold stay exact (see :mod:`core.sql`).
        None keeps every distinct score.
    delimiter, decimal : str, optional
        CSV only: the field delimiter and decimal mark; detected when not given.
    memory_limit, threads
        DuckDB's memory limit (e.g. ``"1GB"``) and worker threads.
    check_rounding : bool, default True
        With ``decimals``: run the exact second pass that measures the
        rounding's largest effect (:class:`RoundingEffect`).
    temp_dir : str, optional
        Where the private spill directory is created (default: the system's
        temporary directory); it is removed when the call ends.
    progress : callable, optional
        ``progress(fraction, stage)`` with ``fraction`` in [0, 1] of the whole
        job and ``stage`` a short text ("checking", "counting", "measuring
        the rounding"); called from the calling thread.
    default_positive : bool, default False
        Without ``positive``: when the label's two values are 0 and 1 (or
        true and false) the event is 1 (true), as ``fulcrum pick`` reads a
        row file; otherwise the error asks which value marks the event.

    Returns
    -------
    Dataset
        ``kind="counts"``: ``y_score`` the table's scores, ``events`` /
        ``non_events`` (and ``event_cost``, ``events_sq``, ``non_events_sq``
        as they apply), ``groups`` as canonical text per table row, the
        intake's warnings, ``read_notes`` with the reduction's statement,
        ``source_rows`` the rows read, ``dropped_rows`` / ``dropped_positions``
        when missing scores were dropped. :func:`reduction_of` gives its
        :class:`Reduction` (the SQL run, rows read, rounding).

    Raises
    ------
    InputError
        The same problems, in the same words, as
        :func:`core.intake.load_dataset` finds row by row; and, with
        ``decimals``, scores too large for an exact grid (|score| * 10^d must
        stay below 10^15).
    """
    t_start = time.perf_counter()
    d = _check_decimals(decimals)
    m = _check_mapping(Mapping(score=score, label=label, positive_label=positive, weight=weight,
                               weight_kind=weight_kind, groups=tuple(groups or ()),
                               case_cost=case_cost, higher_is_riskier=bool(higher_is_riskier),
                               drop_missing_scores=bool(drop_missing_scores)))
    passes = 1 + 1 + (1 if (d is not None and check_rounding) else 0)
    with _Engine(memory_limit, threads, temp_dir, progress) as engine:
        engine.share = 1.0 / passes
        src = _open_source(path, engine, delimiter=delimiter, decimal=decimal)
        for col, role in mapped_columns(m).items():
            if col not in src.types:
                raise missing_column_error(col, role, src.names, src.delimiter)
        checked = _check(engine, src, m, d, default_positive=default_positive)
        clean = _clean_relation(src, m, checked)
        sql = reduction_sql(Relation(clean), score=m.score, label=m.label,
                            positive=checked.event_values, weight=m.weight,
                            case_cost=m.case_cost, groups=m.groups, decimals=d,
                            higher_is_riskier=m.higher_is_riskier, dialect="duckdb",
                            score_bound=checked.score_bound)
        present = ["events", "non_events"] + (["event_cost"] if m.case_cost else []) + (
            ["events_sq", "non_events_sq"] if m.weight else [])
        as_double = ", ".join(f"CAST({quote_identifier(c, 'duckdb')} AS DOUBLE) AS "
                              f"{quote_identifier(c, 'duckdb')}" for c in present)
        table = engine.query(f"SELECT * REPLACE ({as_double}) FROM ({sql}) AS counted",
                             stage="counting", label=src.label)
        rounding = None
        if d is not None and check_rounding:
            rsql = rounding_check_sql(Relation(clean), score=m.score, label=m.label,
                                      positive=checked.event_values, weight=m.weight, decimals=d,
                                      higher_is_riskier=m.higher_is_riskier, dialect="duckdb",
                                      score_bound=checked.score_bound)
            r = engine.query(rsql, stage="measuring the rounding", label=src.label).to_pylist()[0]
            rounding = RoundingEffect(
                decimals=d, direction="floor" if m.higher_is_riskier else "ceil",
                grid_step=10.0**-d, coarse_values=int(r["coarse_values"]),
                raw_scores=int(r["raw_scores"]), max_raw_per_coarse=int(r["max_raw_per_coarse"]),
                max_events_off_grid=float(r["max_events_off_grid"]),
                max_non_events_off_grid=float(r["max_non_events_off_grid"]),
                max_rows_off_grid=float(r["max_rows_off_grid"]),
                rows_off_grid=float(r["rows_off_grid"]), weighted=m.weight is not None, sql=rsql)
        engine_name = f"DuckDB {engine.version}"
    arrays = _count_arrays(table, src, m)
    sampling = m.weight is not None and m.weight_kind == "sampling"
    mapping = Mapping(score=m.score, kind="counts", events="events", non_events="non_events",
                      event_cost="event_cost" if m.case_cost else None,
                      events_sq="events_sq" if sampling else None,
                      non_events_sq="non_events_sq" if sampling else None, groups=m.groups,
                      higher_is_riskier=m.higher_is_riskier,
                      drop_missing_scores=m.drop_missing_scores)
    ds = Dataset.from_count_table(
        arrays["score"], arrays["events"], arrays["non_events"],
        event_cost=arrays.get("event_cost"),
        events_sq=arrays.get("events_sq") if sampling else None,
        non_events_sq=arrays.get("non_events_sq") if sampling else None,
        higher_is_riskier=m.higher_is_riskier, file_name=src.label, mapping=mapping,
        warnings=checked.warnings, groups=arrays["groups"])
    reduction = Reduction(
        engine=engine_name, source_format=src.format, sql=sql, rows_read=checked.rows_read,
        rows_used=checked.rows_read - checked.dropped, table_rows=int(arrays["score"].shape[0]),
        label=m.label, positive_label=checked.matched, weight=m.weight,
        weight_kind=m.weight_kind, case_cost=m.case_cost, decimals=d, rounding=rounding,
        memory_limit=str(memory_limit), threads=int(threads),
        seconds=time.perf_counter() - t_start, notes=tuple(src.notes))
    return replace(ds, read_notes=tuple(src.notes) + (reduction.statement(),),
                   dropped_rows=checked.dropped, dropped_positions=checked.dropped_positions,
                   source_rows=checked.rows_read, source_float32=checked.float32,
                   reduction=reduction)


# =========================================================================== checks


@dataclass
class _Checked:
    rows_read: int
    dropped: int
    dropped_positions: tuple
    event_values: list  # raw label values that mark the event
    matched: object  # the event value as the intake reports it
    warnings: tuple
    float32: bool
    nums: dict  # column -> _Num
    score_bound: float | None  # largest |score| counted


_LABEL_LIMIT = 10_000


def _profile_sql(src: _Source, m: Mapping, nums: dict, keep: str, d: int | None) -> tuple:
    """The check pass: per raw label value, every count the checks need.

    Returns ``(per_label, totals)``: the per-label statement (the most
    frequent values first, at most ``_LABEL_LIMIT`` of them, each row also
    giving the number of distinct values) and the same aggregates without
    grouping, needed only when a label column has more values than that.
    """
    lab = src.col(m.label)
    s = nums[m.score]
    row = quote_identifier(_ROW, "duckdb")
    agg = ["count(*) AS n_all", f"count(*) FILTER (WHERE {keep}) AS n", f"min({row}) AS first_row",
           f"count(*) FILTER (WHERE {s.not_number}) AS s_not_number",
           f"count(*) FILTER (WHERE {s.infinite}) AS s_infinite",
           f"count(*) FILTER (WHERE {s.missing}) AS s_missing",
           f"min({s.value}) FILTER (WHERE {keep} AND NOT {s.missing}) AS s_min",
           f"max({s.value}) FILTER (WHERE {keep} AND NOT {s.missing}) AS s_max",
           f"count(*) FILTER (WHERE {keep} AND ({s.value} < 0 OR {s.value} > 1)) AS s_outside"]
    if d is not None:
        agg.append(f"count(*) FILTER (WHERE {keep} AND abs({s.value}) * {10**d}.0 >= "
                   f"{MAX_GRID_INDEX}.0) AS s_too_large")
    for role, col in (("w", m.weight), ("c", m.case_cost)):
        if col is None:
            continue
        x = nums[col]
        agg += [f"count(*) FILTER (WHERE {keep} AND {x.not_number}) AS {role}_not_number",
                f"count(*) FILTER (WHERE {keep} AND {x.infinite}) AS {role}_infinite",
                f"count(*) FILTER (WHERE {keep} AND {x.missing}) AS {role}_missing",
                f"count(*) FILTER (WHERE {keep} AND {x.value} < 0) AS {role}_negative"]
        if role == "w":
            agg.append(f"sum({x.value}) FILTER (WHERE {keep} AND NOT {x.missing}) AS w_sum")
    for i, g in enumerate(m.groups):
        agg.append(f"count(*) FILTER (WHERE {keep} AND "
                   f"{_missing_sql(src.col(g), src.types[g])}) AS g{i}_missing")
    agg.append(f"count(*) FILTER (WHERE {keep} AND {_missing_sql(lab, src.types[m.label])}) "
               f"AS label_missing")
    aggs = ", ".join(agg)
    per_label = (f"SELECT {lab} AS lab, {aggs}, count(*) OVER () AS n_labels "
                 f"FROM {src.numbered} GROUP BY {lab} "
                 f"ORDER BY n_all DESC, first_row LIMIT {_LABEL_LIMIT}")
    totals = f"SELECT {aggs} FROM {src.numbered}"
    return per_label, totals


def _combine(per: list) -> dict:
    """The totals over the label values (counts and sums added, extremes kept)."""
    out: dict = {}
    for key in per[0]:
        if key in ("lab", "n_labels"):
            continue
        vals = [r[key] for r in per if r[key] is not None]
        if key in ("first_row", "s_min"):
            out[key] = min(vals) if vals else None
        elif key == "s_max":
            out[key] = max(vals) if vals else None
        elif key == "w_sum":
            out[key] = sum(vals) if vals else None
        else:
            out[key] = sum(vals)
    return out


def _check(engine: _Engine, src: _Source, m: Mapping, d: int | None, *,
           default_positive: bool = False) -> _Checked:
    """Every check of the row-level intake, in its order, from one aggregate pass."""
    lab_type = src.types[m.label].split("(")[0]
    if lab_type not in _NUMERIC_TYPES + ("DECIMAL", "BOOLEAN", "VARCHAR"):
        raise InputError(m.label, f"holds values of type {src.types[m.label]}; a label reduced "
                                  f"here must be text, a number or true/false")
    nums = {c: _num_sql(src, c) for c in (m.score, m.weight, m.case_cost) if c is not None}
    s = nums[m.score]
    keep = f"NOT {s.missing}" if m.drop_missing_scores else "TRUE"
    per_sql, totals_sql = _profile_sql(src, m, nums, keep, d)
    per = engine.query(per_sql, stage="checking", label=src.label).to_pylist()
    if not per:
        raise InputError(None, f"{src.label} has a header but no data rows")
    if per[0]["n_labels"] > len(per):  # a label column with very many values: count it all
        tot = engine.query(totals_sql, label=src.label).to_pylist()[0]
    else:
        tot = _combine(per)
    rows = _Rows(engine, src, keep)
    warnings: list[IntakeWarning] = []
    n_all = int(tot["n_all"])

    # ---- score (every row)
    if tot["s_not_number"]:
        raise _not_numbers(rows, m.score, s, rows.where(s.not_number, kept=False), kept=False)
    if tot["s_infinite"]:
        raise InputError(m.score, "holds infinite values", rows.where(s.infinite, kept=False),
                         hint="Every score must be a finite number")
    dropped, dropped_positions = 0, ()
    if tot["s_missing"]:
        if not m.drop_missing_scores:
            raise InputError(m.score, "has missing values", rows.where(s.missing, kept=False),
                             hint="Fill them in, or choose to drop rows with a missing score (the "
                                  "count is reported in the memo)")
        if tot["s_missing"] == n_all:
            raise InputError(m.score, "has no values at all (every row is missing its score)")
        pos = rows.where(s.missing, kept=False, show=_SHOW_DROPPED)
        dropped = int(pos.size)
        dropped_positions = tuple(int(p) + 1 for p in pos[:_SHOW_DROPPED])
        warnings.append(IntakeWarning(
            "dropped_missing_scores",
            f"{m.score}: {_n(dropped, 'row')} with a missing score {_v(dropped, 'was', 'were')} "
            f"dropped as chosen ({format_rows(pos)}); the analysis uses the other "
            f"{n_all - dropped:,} rows", m.score))

    # ---- label
    event_values, matched, merged = _check_label(rows, src, m, per, tot,
                                                 default_positive=default_positive)
    if merged:
        warnings.append(IntakeWarning(
            "label_whitespace",
            f"{m.label}: values that differed only by surrounding spaces were taken as one",
            m.label))
    is_event = [any(_same(r["lab"], v) for v in event_values) for r in per]
    ev_cond = f"{src.col(m.label)} IN ({', '.join(quote_literal(v, 'duckdb') for v in event_values)})"

    def total(key, events_only=False):
        return sum((r[key] or 0) for r, e in zip(per, is_event) if e or not events_only)

    # ---- weight
    if m.weight is not None:
        w = nums[m.weight]
        if tot["w_not_number"]:
            raise _not_numbers(rows, m.weight, w, rows.where(w.not_number), kept=True)
        if tot["w_infinite"]:
            raise InputError(m.weight, "holds infinite weights", rows.where(w.infinite))
        if tot["w_missing"]:
            raise InputError(m.weight, "has missing values", rows.where(w.missing))
        if tot["w_negative"]:
            raise InputError(m.weight, "holds negative weights", rows.where(f"{w.value} < 0"))

    # ---- groups (warnings)
    for i, g in enumerate(m.groups):
        k = int(tot[f"g{i}_missing"])
        if k:
            miss = rows.where(_missing_sql(src.col(g), src.types[g]))
            warnings.append(IntakeWarning(
                "group_missing",
                f"{g}: {k:,} row{'s' if k != 1 else ''} {'have' if k != 1 else 'has'} no value "
                f"({format_rows(miss)}); {'they are' if k != 1 else 'it is'} kept with the group "
                f"value missing", g))

    # ---- case cost
    if m.case_cost is not None:
        c = nums[m.case_cost]
        if tot["c_not_number"]:
            raise _not_numbers(rows, m.case_cost, c, rows.where(c.not_number), kept=True)
        if total("c_infinite", True):
            raise InputError(m.case_cost, "holds infinite amounts",
                             rows.where(f"{ev_cond} AND {c.infinite}"))
        if total("c_missing", True):
            raise InputError(m.case_cost, "has missing values for events",
                             rows.where(f"{ev_cond} AND {c.missing}"))
        if total("c_negative", True):
            raise InputError(m.case_cost, "holds negative amounts",
                             rows.where(f"{ev_cond} AND {c.value} < 0"))

    # ---- class weights
    if m.weight is not None:
        w_ev = sum((r["w_sum"] or 0.0) for r, e in zip(per, is_event) if e)
        w_ne = sum((r["w_sum"] or 0.0) for r, e in zip(per, is_event) if not e)
        if w_ev <= 0 or w_ne <= 0:
            which = "events" if w_ev <= 0 else "non-events"
            raise InputError(m.weight, f"gives the {which} a total weight of zero; both classes "
                                       f"need positive weight")

    # ---- the grid (decimals)
    if d is not None and tot["s_too_large"]:
        big = max(abs(float(tot["s_min"])), abs(float(tot["s_max"])))
        raise InputError(
            m.score, f"holds scores as large as {big:.6g}: coarsening to {d} decimals needs "
                     f"|score| x 10^{d} below 10^15 for the grid to be exact",
            rows.where(f"abs({s.value}) * {10**d}.0 >= {MAX_GRID_INDEX}.0"),
            hint="Choose fewer decimals, or keep every distinct score")

    # ---- warnings that do not need positions
    f32 = src.types[m.score] == "FLOAT"
    if f32:
        _warn_float32(None, pd.Series(np.empty(0, dtype=np.float32)), m.score, warnings)
    k = int(tot["s_outside"] or 0)
    if k:
        warnings.append(IntakeWarning(
            "scores_outside_unit_interval",
            f"{m.score}: {_n(k, 'score')} {_v(k, 'lies', 'lie')} outside [0, 1] (from "
            f"{float(tot['s_min']):.6g} to {float(tot['s_max']):.6g}), so the scores are not "
            f"probabilities: calibration, probability thresholds and net benefit stay off",
            m.score))
    n_events = (sum((r["w_sum"] or 0.0) for r, e in zip(per, is_event) if e)
                if (m.weight is not None and m.weight_kind == "frequency")
                else total("n", True))
    _warn_few_events(n_events, m.label, warnings)
    return _Checked(rows_read=n_all, dropped=dropped, dropped_positions=dropped_positions,
                    event_values=event_values, matched=matched, warnings=tuple(warnings),
                    float32=f32, nums=nums,
                    score_bound=None if tot["s_min"] is None else max(abs(float(tot["s_min"])),
                                                                       abs(float(tot["s_max"]))))


def _same(a, b) -> bool:
    """The same raw label value (NaN labels are missing and never reach here)."""
    return type(a) is type(b) and a == b


def _check_label(rows: _Rows, src: _Source, m: Mapping, per: list, tot: dict, *,
                 default_positive: bool = False) -> tuple[list, object, bool]:
    """The intake's label checks over the distinct raw values (first appearance first).

    ``per`` holds the most frequent values (all of them unless the column has
    more than ``_LABEL_LIMIT``; then only the count of the others is known,
    which is all the messages need).
    """
    lab = src.col(m.label)
    missing_sql = _missing_sql(lab, src.types[m.label])
    if tot["label_missing"]:
        raise InputError(m.label, "has missing values", rows.where(missing_sql),
                         hint="Every case needs a label; fill them in or remove those rows")
    n_distinct = int(per[0]["n_labels"])
    per = sorted(per, key=lambda r: r["first_row"])
    raw_values = [r["lab"] for r in per]
    ser = _typed_distinct(src, m.label, raw_values)
    codes, uniques, merged = _label_codes(ser)
    kept = np.array([int(r["n"]) for r in per], dtype=np.int64)
    ok = codes >= 0
    counts = np.bincount(codes[ok], weights=kept[ok], minlength=len(uniques)).astype(np.int64)
    present = counts > 0
    k = int(present.sum())
    order = [i for i in np.argsort(-counts, kind="stable") if present[i]]
    if n_distinct > len(per):  # values beyond the fetched ones: only their number is listed
        k += n_distinct - len(per)
        order += order[-1:] * (n_distinct - len(per))
    listing = _value_list(uniques, counts, order)
    if k != 2:
        if k < 2:
            raise InputError(m.label, f"has only one value ({listing}); it needs exactly two: the "
                                      f"event and the non-event")
        top = [v for v, c in zip(raw_values, codes) if c in (order[0], order[1])]
        lits = ", ".join(quote_literal(_plain(v), "duckdb") for v in top)
        raise InputError(m.label, f"has {k} distinct values ({listing}); it needs exactly two: "
                                  f"the event and the non-event",
                         rows.where(f"NOT {missing_sql} AND {lab} NOT IN ({lits})"),
                         hint="Recode it to two values, or choose another label column")
    positive = m.positive_label
    if default_positive and (positive is None or (isinstance(positive, str) and not positive.strip())):
        texts = {value_text(uniques[i]).strip().casefold() for i in np.flatnonzero(present)}
        if texts <= {"0", "1"}:
            positive = "1"
        elif texts <= {"true", "false"}:
            positive = "true"
    if positive is None or (isinstance(positive, str) and not positive.strip()):
        raise InputError(m.label, f"needs an event value: which of its values ({listing}) marks "
                                  f"the event?")
    hit = _match_positive(uniques, present, positive)
    if hit is None:
        raise InputError(m.label, f"has no value matching the event value {positive!r}; its "
                                  f"values are {listing}")
    matched = uniques[hit]
    if isinstance(matched, np.generic):
        matched = matched.item()
    if isinstance(matched, float) and matched.is_integer():
        matched = int(matched)
    events = [_plain(v) for v, c in zip(raw_values, codes) if c == hit]
    return events, matched, merged


def _plain(v):
    """A raw value as a plain Python value for a SQL literal."""
    if isinstance(v, np.generic):
        return v.item()
    return v


# =========================================================================== the count table


def _clean_relation(src: _Source, m: Mapping, checked: _Checked) -> str:
    """The FROM item the reduction reads: numbers as DOUBLE under the user's column names."""
    cols = []
    for name in dict.fromkeys([m.score, m.label, m.weight, m.case_cost, *m.groups]):
        if name is None:
            continue
        q = quote_identifier(name, "duckdb")
        if name in checked.nums:
            cols.append(f"{checked.nums[name].value} AS {q}")
        else:
            cols.append(f"{src.col(name)} AS {q}")
    where = f" WHERE NOT {checked.nums[m.score].missing}" if m.drop_missing_scores else ""
    return f"(SELECT {', '.join(cols)} FROM {src.raw}{where}) AS src"


def _count_arrays(table, src: _Source, m: Mapping) -> dict:
    """The fetched count table as arrays: group values as canonical text, rows merged and sorted."""
    score = np.asarray(table.column(m.score).to_numpy(zero_copy_only=False), dtype=np.float64)
    sums = {c: np.asarray(table.column(c).to_numpy(zero_copy_only=False), dtype=np.float64)
            for c in ("events", "non_events", "event_cost", "events_sq", "non_events_sq")
            if c in table.column_names}
    texts = {}
    codes = []
    for g in m.groups:
        col = table.column(g)
        if src.format == "parquet":
            ser = col.to_pandas()
            gc, dictionary = text_codes(ser)
        else:
            raw = col.to_pylist()
            distinct = list(dict.fromkeys(raw))
            typed = _typed_distinct(src, g, distinct)
            dc, dictionary = text_codes(typed)
            lookup = {v: i for i, v in enumerate(distinct)}
            gc = dc[np.fromiter((lookup[v] for v in raw), dtype=np.int64, count=len(raw))]
        # order the codes by text so the table's row order does not depend on the engine
        rank = np.argsort(np.asarray(dictionary, dtype=object).astype(str), kind="stable")
        inv = np.empty(len(dictionary) + 1, dtype=np.int64)
        inv[rank] = np.arange(len(dictionary))
        inv[-1] = -1
        codes.append(inv[gc])
        texts[g] = np.asarray(dictionary, dtype=object)[rank]
    keys = [score] + codes
    order = np.lexsort(keys[::-1]) if len(keys) > 1 else np.argsort(score, kind="stable")
    score = score[order] + 0.0
    codes = [c[order] for c in codes]
    sums = {k: v[order] for k, v in sums.items()}
    n = score.shape[0]
    new = np.ones(n, dtype=bool)
    if n:
        same = score[1:] == score[:-1]
        for c in codes:
            same &= c[1:] == c[:-1]
        new[1:] = ~same
    starts = np.flatnonzero(new)
    out = {"score": score[starts]}
    for k, v in sums.items():
        out[k] = np.add.reduceat(v, starts) if n else v
    groups = {}
    for g, c in zip(m.groups, codes):
        table_codes = c[starts]
        arr = np.empty(table_codes.shape[0], dtype=object)
        has = table_codes >= 0
        arr[has] = texts[g][table_codes[has]]
        arr[~has] = None
        groups[g] = arr
    out["groups"] = groups
    return out
