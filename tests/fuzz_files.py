"""Generated bad (and good) input files for the fuzz tests, each with what it should do.

:func:`make_file` turns a kind and a seed into a :class:`FuzzFile`: the file's
bytes, its name, the mapped score and label columns and the oracle: the
scores and labels a correct read gives (``None`` when the file carries no
intended table, e.g. random bytes) and the data rows (1-based) whose score
or label cell is broken on purpose. The same seed always gives the same
file, so hypothesis (seeded, ``derandomize=True``) drives the seeds and the
subprocess and AppTest checks take fixed seeds.

:func:`check_outcome` judges what a door (the core, the CLI, the app) did
with a file:

* a file with broken cells must be refused with an
  :class:`~core.errors.InputError` naming the broken column and exactly
  those rows (the message lists the first five);
* a file that is a well-formed table in one of the forms Fulcrum reads must
  load, and load the intended numbers (``strict``); a form Fulcrum may
  decline (``lenient``: a one-class label, a form of number it does not
  read) either loads the intended numbers or is refused naming a column or
  the file;
* anything else (random or damaged bytes) either loads or is refused with an
  InputError; no other exception, ever.

Kinds: random bytes, damaged (byte flips, cuts) good files, clean CSV in many
dialects (delimiters, decimal comma, thousands separators, BOM, UTF-16,
cp1252 / latin-1, CRLF, quoted newlines and delimiters), special numbers
(1e308, -0, 5e-324), missing-value spellings, text in the score, infinite
scores, missing and extra label values, ragged rows, duplicate headers,
header-only and one-column files, Excel (plain, text cells, formulas without
saved results), Parquet (float64, float32, integers, text, nulls, damaged),
gzip.
"""

from __future__ import annotations

import gzip
import io
import random
from dataclasses import dataclass, field

import numpy as np

from core.reading import MISSING_TEXT

__all__ = ["KINDS", "FuzzFile", "check_outcome", "make_file"]

SCORE, LABEL = "score", "label"

#: Missing-value spellings the reader knows (a missing score is refused, naming its rows).
NAN_SPELLINGS = tuple(t for t in MISSING_TEXT if t)
#: Cells that are not numbers in any reading.
NOT_NUMBERS = ("abc", "x1", "?", "0.5.5", "1/2", "--3", "None", "NAN", "n.a.", "12%", "0x1g",
               "TRUE", "1e", "e5", "<0.1", "≈0.3", "٣", "0,5,5")
INFINITE = ("inf", "-inf", "Infinity", "-Infinity", "1e309", "-1e400")
SPECIAL = ("1e308", "-1e308", "-0", "-0.0", "0.0", "5e-324", "2.2250738585072014e-308",
           "1E-5", "+0.25", ".5", "7.", "123456789", "0.1000000000000000055511151231257827")
ACCENTED = ("Zürich", "São Paulo", "Malmö", "Ærø", "Île-de-France", "Kraków", "Ñuñoa", "€ fund")
TEXT_VALUES = ("north", "south", "a,b", 'say "hi"', "line\nbreak", "semi;colon", "tab\there",
               " padded ", "", "pipe|bar")


@dataclass
class FuzzFile:
    """One generated file and what a correct door does with it (see the module docstring)."""

    kind: str
    seed: int
    name: str
    data: bytes
    score: str = SCORE
    label: str = LABEL
    scores: np.ndarray | None = None
    labels: np.ndarray | None = None  # True = event
    bad_column: str | None = None
    bad_rows: tuple[int, ...] = ()
    expect: str = "either"  # "load", "refuse", "lenient" or "either"
    refuse_column: str | None = None  # with expect == "refuse": the column the error must name
    notes: dict = field(default_factory=dict)


# --------------------------------------------------------------------------- tables


def _number_text(rng: random.Random) -> str:
    """A score as written in a file (point decimal), varied in form."""
    r = rng.random()
    if r < 0.08:
        return rng.choice(SPECIAL)
    if r < 0.15:
        return str(rng.randint(-50, 50))
    decimals = rng.choice((1, 2, 3, 4, 6, 9, 17))
    value = rng.uniform(-0.2, 1.2) if rng.random() < 0.2 else rng.random()
    text = f"{value:.{decimals}f}"
    if rng.random() < 0.05:
        text = f"{value:.3e}"
    return text


def _table(rng: random.Random, n: int | None = None):
    """(score texts, labels as bool): mostly tiny tables, a few of a few hundred rows."""
    if n is None:
        n = rng.choice((1, 2, 3, 5, 8, 12, 20, 30)) if rng.random() < 0.9 else rng.randint(50, 400)
    scores = [_number_text(rng) for _ in range(n)]
    p = rng.choice((0.05, 0.3, 0.5))
    labels = [rng.random() < p for _ in range(n)]
    return scores, labels


def _values(texts) -> np.ndarray:
    return np.array([float(t) for t in texts], dtype=np.float64)


def _label_texts(labels, rng: random.Random) -> list[str]:
    style = rng.choice(("01", "01", "10f"))
    if style == "10f":
        return ["1.0" if v else "0.0" for v in labels]
    return ["1" if v else "0" for v in labels]


def _two_classes(labels) -> bool:
    return any(labels) and not all(labels)


def _quote(cell: str, delim: str, always: bool) -> str:
    if always or any(c in cell for c in (delim, '"', "\n", "\r")) or cell != cell.strip():
        return '"' + cell.replace('"', '""') + '"'
    return cell


def _csv_text(header, rows, *, delim=",", newline="\n", quote_all=False, trailing=True) -> str:
    lines = [delim.join(_quote(h, delim, quote_all) for h in header)]
    lines += [delim.join(_quote(c, delim, quote_all) for c in r) for r in rows]
    return newline.join(lines) + (newline if trailing else "")


def _comma_decimal(text: str, thousands: bool) -> str:
    """1234.5 -> '1234,5' (or '1.234,5' with thousands grouping)."""
    if "e" in text.lower() or text.lower() in ("inf", "-inf"):
        return text.replace(".", ",")
    sign = "-" if text.startswith("-") else ("+" if text.startswith("+") else "")
    body = text.lstrip("+-")
    whole, _, frac = body.partition(".")
    if thousands and len(whole) > 3:
        groups = []
        while len(whole) > 3:
            groups.insert(0, whole[-3:])
            whole = whole[:-3]
        whole = ".".join([whole] + groups)
    return sign + whole + ("," + frac if frac or body.endswith(".") else "")


# --------------------------------------------------------------------------- kinds


def _clean_csv(rng: random.Random, f: FuzzFile) -> None:
    """A well-formed table in one of the text dialects Fulcrum reads."""
    scores, labels = _table(rng)
    delim = rng.choice((",", ",", ";", "\t", "|"))
    decimal_comma = delim != "," and rng.random() < 0.4
    thousands = decimal_comma and rng.random() < 0.5
    if thousands:  # big numbers, always with a decimal part, so the grouping is unambiguous
        scores = [f"{rng.uniform(0, 2_000_000):.2f}" for _ in scores]
    written = [_comma_decimal(s, thousands) if decimal_comma else s for s in scores]
    extra = rng.random() < 0.5
    header = [SCORE, LABEL] + (["site"] if extra else [])
    if rng.random() < 0.3:
        header = [header[1], header[0]] + header[2:]
    lab = _label_texts(labels, rng)
    if decimal_comma:
        lab = [v.replace(".", ",") for v in lab]
    enc = rng.choice(("utf-8", "utf-8", "utf-8-sig", "utf-16", "cp1252", "latin-1"))
    pool = TEXT_VALUES + tuple(a for a in ACCENTED if enc != "latin-1" or "€" not in a)
    rows = []
    for s, y in zip(written, lab):
        cells = {SCORE: s, LABEL: y}
        if extra:
            cells["site"] = rng.choice(pool)
        rows.append([cells[h] for h in header])
    text = _csv_text(header, rows, delim=delim, newline=rng.choice(("\n", "\r\n")),
                     quote_all=rng.random() < 0.15, trailing=rng.random() < 0.8)
    if rng.random() < 0.1:
        text = f"sep={delim}\n" + text if delim != "\t" else text
    f.data = text.encode(enc)
    f.name = rng.choice(("scores.csv", "scores.txt", "export.csv")) if delim != "\t" else "scores.tsv"
    f.scores, f.labels = _values(scores), np.array(labels)
    f.notes.update(delimiter=delim, decimal_comma=decimal_comma, thousands=thousands, encoding=enc)
    f.expect = "load" if _two_classes(labels) else "lenient"
    if decimal_comma and any("e" in s.lower() for s in scores):
        f.expect = "lenient"  # 1,5e-3: a decimal comma with an exponent is a rarer form


def _broken_cells(rng: random.Random, f: FuzzFile) -> None:
    """A clean comma table with a chosen kind of broken cell in the score or label column."""
    scores, labels = _table(rng, rng.choice((3, 6, 10, 25, 60)))
    n = len(scores)
    what = rng.choice(("missing", "text", "infinite", "label_missing", "label_extra"))
    k = rng.randint(1, min(n, 8))
    rows = sorted(rng.sample(range(n), k))
    # the broken cells' neighbours hold both classes so the label is not refused for that
    labels[0] = True
    labels[-1] = not n > 1
    lab = _label_texts(labels, rng)
    column = SCORE
    if what == "missing":
        for r in rows:
            scores[r] = rng.choice(NAN_SPELLINGS)
    elif what == "text":
        for r in rows:
            scores[r] = rng.choice(NOT_NUMBERS)
    elif what == "infinite":
        for r in rows:
            scores[r] = rng.choice(INFINITE)
    elif what == "label_missing":
        column = LABEL
        rows = [r for r in rows if 0 < r < n - 1] or []
        for r in rows:
            lab[r] = rng.choice(("", "NA", "null"))
    else:
        column = LABEL
        rows = [r for r in rows if 0 < r < n - 1] or []
        for r in rows:
            lab[r] = rng.choice(("2", "yes", "-1", "unknown"))
        # which values are the extra ones is not knowable (the rarest are named): column only
        f.notes["broken"] = what
        f.data = _csv_text([SCORE, LABEL], [[s, y] for s, y in zip(scores, lab)]).encode()
        f.name = "broken.csv"
        f.expect, f.refuse_column = ("refuse", LABEL) if rows else ("either", None)
        return
    text = _csv_text([SCORE, LABEL], [[s, y] for s, y in zip(scores, lab)])
    f.data = text.encode()
    f.name = "broken.csv"
    f.notes["broken"] = what
    if rows:
        f.bad_column, f.bad_rows = column, tuple(r + 1 for r in rows)
        f.expect = "refuse"
        f.refuse_column = column
    else:
        f.expect = "either"
        if n > 1:
            f.scores, f.labels = None, None


def _ragged(rng: random.Random, f: FuzzFile) -> None:
    """Rows with one field too many or too few."""
    scores, labels = _table(rng, rng.choice((3, 8, 20, 50)))
    n = len(scores)
    rows = sorted(rng.sample(range(n), rng.randint(1, min(n, 7))))
    lines = [[s, y] for s, y in zip(scores, _label_texts(labels, rng))]
    for r in rows:
        lines[r] = lines[r] + ["extra"] if rng.random() < 0.5 else lines[r][:1]
    f.data = _csv_text([SCORE, LABEL], lines).encode()
    f.name = "ragged.csv"
    f.bad_column, f.bad_rows = None, tuple(r + 1 for r in rows)
    f.expect = "refuse"


def _structure(rng: random.Random, f: FuzzFile) -> None:
    """Duplicate headers, header only, one column, empty, blank lines only, no label column."""
    what = rng.choice(("duplicate", "header_only", "one_column", "empty", "blank", "no_label",
                       "unnamed"))
    f.notes["structure"] = what
    scores, labels = _table(rng, rng.choice((2, 5, 9)))
    lab = _label_texts(labels, rng)
    if what == "duplicate":
        dup = rng.choice((SCORE, LABEL))
        header = [SCORE, LABEL, dup]
        text = _csv_text(header, [[s, y, s if dup == SCORE else y] for s, y in zip(scores, lab)])
        f.expect, f.refuse_column = "refuse", dup
    elif what == "header_only":
        text = rng.choice(("score,label\n", "score,label", "score;label\r\n", "\ufeffscore,label\n"))
        f.expect = "refuse"
    elif what == "one_column":
        text = _csv_text([SCORE], [[s] for s in scores])
        f.expect, f.refuse_column = "refuse", LABEL
    elif what == "empty":
        text = rng.choice(("", "\n", "\ufeff", " "))
        f.expect = "refuse"
    elif what == "blank":
        text = "\n\n\r\n  \n"
        f.expect = "refuse"
    elif what == "no_label":
        text = _csv_text([SCORE, "outcome"], [[s, y] for s, y in zip(scores, lab)])
        f.expect, f.refuse_column = "refuse", LABEL
    else:  # header cells without names; the mapped columns are named
        text = _csv_text([SCORE, "", LABEL, ""], [[s, "x", y, "z"] for s, y in zip(scores, lab)])
        f.scores, f.labels = _values(scores), np.array(labels)
        f.expect = "load" if _two_classes(labels) else "lenient"
    f.data = text.encode()
    f.name = "shape.csv"


def _random_bytes(rng: random.Random, f: FuzzFile) -> None:
    n = rng.choice((0, 1, 3, 16, 64, 256, 1024))
    prefix = rng.choice((b"", b"", b"score,label\n", b"PAR1", b"PK\x03\x04", b"\x1f\x8b",
                         b"\xef\xbb\xbf", b"\xff\xfe", b"\xd0\xcf\x11\xe0\xa1\xb1\x1a\xe1"))
    f.data = prefix + bytes(rng.getrandbits(8) for _ in range(n))
    f.name = rng.choice(("random.csv", "random.parquet", "random.xlsx", "random.bin", "random.csv.gz"))


def _damaged(rng: random.Random, f: FuzzFile) -> None:
    """A good file (any format) with bytes flipped, inserted, deleted, or cut short."""
    base = FuzzFile(kind="base", seed=f.seed, name="", data=b"")
    rng.choice((_clean_csv, _clean_csv, _excel, _parquet, _gzip))(rng, base)
    data = bytearray(base.data)
    how = rng.choice(("cut", "flip", "insert", "delete"))
    if how == "cut":
        data = data[: rng.randint(0, max(len(data) - 1, 0))]
    else:
        for _ in range(rng.randint(1, 6)):
            if not data:
                break
            pos = rng.randrange(len(data))
            if how == "flip":
                data[pos] = rng.getrandbits(8)
            elif how == "insert":
                data[pos:pos] = bytes([rng.choice(b'",;\n\r\t\x00\xff0.-e')])
            else:
                del data[pos]
    f.data = bytes(data)
    f.name = base.name
    f.notes.update(base=base.kind, damage=how)


def _excel(rng: random.Random, f: FuzzFile) -> None:
    """An .xlsx workbook: plain numbers, numbers stored as text, text cells or unsaved formulas."""
    import openpyxl

    scores, labels = _table(rng, rng.choice((2, 4, 10, 30)))
    n = len(scores)
    wb = openpyxl.Workbook()
    ws = wb.active
    if rng.random() < 0.3:  # a second, empty sheet before or after the data
        ws.title = "Data"
        wb.create_sheet("Notes", 0 if rng.random() < 0.5 else 1)
    ws.append([SCORE, LABEL, "note"])
    what = rng.choice(("plain", "plain", "formula", "text", "int_labels", "bool_labels"))
    rows = sorted(rng.sample(range(n), rng.randint(1, min(n, 5))))
    # a workbook keeps 15 significant digits (what a spreadsheet program shows and stores)
    values = np.array([float(f"{v:.15g}") for v in _values(scores)])
    for i in range(n):
        score_cell = float(values[i])
        label_cell = 1 if labels[i] else 0
        if what == "formula" and i in rows:
            score_cell = f"=C{i + 2}*2"
        if what == "text" and i in rows:
            score_cell = rng.choice(NOT_NUMBERS)
        if what == "bool_labels":
            label_cell = bool(labels[i])
        ws.append([score_cell, label_cell, rng.choice(ACCENTED + TEXT_VALUES)])
    buf = io.BytesIO()
    wb.save(buf)
    f.data = buf.getvalue()
    f.name = "scores.xlsx"
    f.notes["excel"] = what
    sheet_first_is_data = wb.sheetnames[0] == ws.title
    if not sheet_first_is_data:
        f.expect = "refuse"  # the first sheet (the one read) is empty
        f.notes["first_sheet"] = wb.sheetnames[0]
        return
    if what in ("formula", "text"):
        f.bad_column, f.bad_rows = SCORE, tuple(r + 1 for r in rows)
        f.expect, f.refuse_column = "refuse", SCORE
        return
    f.scores, f.labels = values, np.array(labels)
    f.expect = "load" if _two_classes(labels) and what != "bool_labels" else "lenient"


def _parquet(rng: random.Random, f: FuzzFile) -> None:
    """A Parquet file with float64, float32, integer or text scores, optionally with nulls."""
    import pyarrow as pa
    import pyarrow.parquet as pq

    scores, labels = _table(rng, rng.choice((2, 5, 12, 40)))
    values = _values(scores)
    what = rng.choice(("float64", "float32", "int", "text", "nulls", "label_text"))
    n = len(values)
    rows = sorted(rng.sample(range(n), rng.randint(1, min(n, 5))))
    if what == "float32":
        with np.errstate(over="ignore"):  # 1e308 becomes inf in 32 bits: judged as "either" below
            col = pa.array(values.astype(np.float32))
            values = values.astype(np.float32).astype(np.float64)
    elif what == "int":
        ints = np.round(np.clip(values, -1e6, 1e6) * 100).astype(np.int64)
        col = pa.array(ints)
        values = ints.astype(np.float64)
    elif what == "text":
        col = pa.array(scores, type=pa.string())
    elif what == "nulls":
        col = pa.array([None if i in rows else float(v) for i, v in enumerate(values)],
                       type=pa.float64())
    else:
        col = pa.array(values)
    if what == "label_text":
        lab = pa.array(["1" if v else "0" for v in labels])
    else:
        lab = pa.array(np.array(labels, dtype=np.int64))
    if np.isinf(values).any() or (what == "float32" and not np.isfinite(values).all()):
        what = what + "_inf"
    table = pa.table({SCORE: col, LABEL: lab})
    buf = io.BytesIO()
    pq.write_table(table, buf)
    f.data = buf.getvalue()
    f.name = "scores.parquet"
    f.notes["parquet"] = what
    if what == "nulls":
        f.bad_column, f.bad_rows = SCORE, tuple(r + 1 for r in rows)
        f.expect, f.refuse_column = "refuse", SCORE
        return
    if what.endswith("_inf"):
        f.expect = "either"
        return
    f.scores, f.labels = values, np.array(labels)
    f.expect = "load" if _two_classes(labels) and what in ("float64", "float32", "int") else "lenient"


def _gzip(rng: random.Random, f: FuzzFile) -> None:
    _clean_csv(rng, f)
    f.data = gzip.compress(f.data, mtime=0)
    f.name = f.name + ".gz"


def _encodings(rng: random.Random, f: FuzzFile) -> None:
    """Text in encodings that are not UTF-8: UTF-16 without a mark, cp1252 text, mixed bytes."""
    _clean_csv(rng, f)
    text = f.data.decode(f.notes["encoding"].replace("latin-1", "latin-1"))
    what = rng.choice(("utf16le_nobom", "utf16be_nobom", "utf32", "mixed"))
    f.notes["encoding_case"] = what
    if what == "utf16le_nobom":
        f.data = text.lstrip("\ufeff").encode("utf-16-le")
        f.expect = "refuse"
    elif what == "utf16be_nobom":
        f.data = text.lstrip("\ufeff").encode("utf-16-be")
        f.expect = "refuse"
    elif what == "utf32":
        f.data = text.encode("utf-32")
        f.expect = "refuse"
    else:  # a UTF-8 file with one cp1252 word pasted in
        f.data = text.lstrip("\ufeff").encode("utf-8") + "Zürich".encode("cp1252")
        f.expect = "either"
    f.refuse_column = None


_KIND_MAKERS = {
    "clean_csv": _clean_csv,
    "broken_cells": _broken_cells,
    "ragged": _ragged,
    "structure": _structure,
    "random_bytes": _random_bytes,
    "damaged": _damaged,
    "excel": _excel,
    "parquet": _parquet,
    "gzip": _gzip,
    "encodings": _encodings,
}

#: Every kind, weighted by how often the fuzz tests draw it (cheap text kinds most often).
KINDS = (
    ("clean_csv",) * 6 + ("broken_cells",) * 4 + ("ragged",) * 2 + ("structure",) * 2
    + ("random_bytes",) * 3 + ("damaged",) * 4 + ("excel",) + ("parquet",) * 2 + ("gzip",)
    + ("encodings",)
)


def make_file(kind: str, seed: int) -> FuzzFile:
    """The file of this kind and seed (always the same bytes for the same pair)."""
    rng = random.Random(f"{kind}:{seed}")
    f = FuzzFile(kind=kind, seed=seed, name="file.csv", data=b"")
    _KIND_MAKERS[kind](rng, f)
    return f


# --------------------------------------------------------------------------- judging


def check_outcome(f: FuzzFile, dataset=None, error: Exception | None = None) -> str:
    """Judge one door's result for ``f``; return "loaded" or "refused", or raise AssertionError.

    Exactly one of ``dataset`` (a :class:`~core.dataset.Dataset`) and ``error``
    is given. Any error that is not an :class:`~core.errors.InputError` fails.
    """
    from core.errors import InputError

    where = f"{f.kind} seed {f.seed} ({f.name}, {f.notes})"
    if error is not None:
        if not isinstance(error, InputError):
            raise AssertionError(f"{where}: {type(error).__name__}: {error}") from error
        msg = str(error)
        assert msg.strip() and "\n" not in msg.strip(), f"{where}: {msg!r}"
        assert "Traceback" not in msg, where
        if f.expect == "load":
            raise AssertionError(f"{where}: a well-formed table was refused: {msg}")
        if f.bad_rows:
            if f.bad_column is not None:
                assert error.column == f.bad_column, f"{where}: {msg}"
            assert error.n_rows == len(f.bad_rows), f"{where}: {msg}"
            assert error.rows == f.bad_rows[:5], f"{where}: {msg}"
        elif f.refuse_column is not None:
            assert error.column == f.refuse_column, f"{where}: {msg}"
        elif f.expect == "lenient":
            assert error.column is not None or f.name in msg or "file" in msg.lower(), where
        return "refused"
    assert dataset is not None
    if f.expect == "refuse":
        raise AssertionError(f"{where}: loaded a file that must be refused")
    if f.scores is not None and f.expect in ("load", "lenient"):
        np.testing.assert_array_equal(dataset.y_score, f.scores, err_msg=where)
        np.testing.assert_array_equal(dataset.y_true.astype(bool), f.labels, err_msg=where)
    return "loaded"


# =========================================================================== policy, memo fields, records


def _odd_value(rng: random.Random):
    """A TOML value of any type, often at an edge."""
    import datetime as dt

    return rng.choice((
        0, 1, -1, 0.5, -0.0, 1e308, -1e308, 5e-324, float("inf"), float("-inf"), float("nan"),
        10**30, -(10**30), 2**63 - 1, 10**400, rng.random(), rng.uniform(-2, 2), rng.randint(-5, 500),
        "", " ", "day", "max_youden", "recall", "site", "x" * 300, "<b>bold</b>", "\u202eright",
        "line\nbreak", True, False, [], ["site"], ["site", "site"], [1, 2], [""], {"a": 1}, {},
        dt.date(2025, 7, 1), dt.datetime(2025, 7, 1, 12, 0), dt.time(8, 30),
    ))


def _valid_policy(rng: random.Random) -> dict:
    """A policy dict that should load (within every rule of the policy file)."""
    from core.policy import FAIRNESS_METRICS, OBJECTIVES, PERIODS

    kind = rng.choice(OBJECTIVES)
    d: dict = {"objective": {"kind": kind}}
    if kind == "max_fbeta" and rng.random() < 0.7:
        d["objective"]["beta"] = rng.choice((0.5, 1, 2.0, 3))
    if kind == "max_net_benefit":
        d["objective"]["threshold_probability"] = rng.uniform(0.01, 0.99)
    if kind == "min_cost" or rng.random() < 0.4:
        fp = rng.choice((1, 1.0, 2.5, 0.1))
        d["costs"] = {"false_positive": fp}
        if rng.random() < 0.2:
            d["costs"]["false_negative_column"] = "invoice_amount"
        else:
            d["costs"]["false_negative"] = fp + rng.choice((1, 10, 99.5))
        if rng.random() < 0.3:
            d["costs"]["unit"] = rng.choice(("harm points", "EUR", "Ω units", "<i>pts</i>"))
    if rng.random() < 0.5:
        dep: dict = {}
        if rng.random() < 0.6:
            dep["prevalence"] = rng.uniform(0.01, 0.05)
        if rng.random() < 0.3:
            lo = 0.005
            hi = 0.08
            dep.update(prevalence_low=lo, prevalence_high=hi, prevalence_source="audit 2025")
        if rng.random() < 0.5:
            dep["cases_per_period"] = rng.choice((100, 1200.5, 5))
            dep["period"] = rng.choice(tuple(PERIODS))
        d["deployment"] = dep
    rules: dict = {}
    if kind == "max_recall" or rng.random() < 0.3:
        rules["max_flag_rate"] = rng.uniform(0.05, 0.5)
    if kind == "max_precision" or rng.random() < 0.3:
        rules["min_recall"] = rng.uniform(0.1, 0.9)
    if rng.random() < 0.2:
        rules["confidence"] = 0.95
    if rules:
        d["rules"] = rules
    if rng.random() < 0.2:
        d["fairness"] = {"metric": rng.choice(FAIRNESS_METRICS), "groups": ["site"],
                         "tolerance": 0.05}
    return d


def _mutate_dict(rng: random.Random, d: dict, known: dict) -> dict:
    """Change, drop or add keys (and sections) of a nested dict."""
    import copy

    d = copy.deepcopy(d)
    for _ in range(rng.randint(1, 4)):
        what = rng.choice(("set", "set", "drop", "add", "section"))
        section = rng.choice(sorted(known))
        if what == "section":
            d[rng.choice((section, "extra", "Objective"))] = _odd_value(rng)
            continue
        table = d.setdefault(section, {}) if isinstance(d.get(section, {}), dict) else None
        if table is None:
            continue
        keys = sorted(known[section]) if known[section] else ["x"]
        if what == "set":
            table[rng.choice(keys)] = _odd_value(rng)
        elif what == "drop" and table:
            table.pop(rng.choice(sorted(table)))
        else:
            table[rng.choice(("unknown_key", keys[0].upper(), keys[0] + "s"))] = _odd_value(rng)
    return d


def _toml_text(rng: random.Random, d: dict) -> str:
    import tomli_w

    try:
        return tomli_w.dumps(d)
    except (TypeError, ValueError):
        return "# not writable as TOML\n" + repr(d)


def _mutate_text(rng: random.Random, text: str) -> bytes:
    data = bytearray(text.encode("utf-8"))
    how = rng.choice(("cut", "flip", "insert", "bom", "latin", "none"))
    if how == "cut" and data:
        data = data[: rng.randrange(len(data))]
    elif how == "flip" and data:
        for _ in range(rng.randint(1, 4)):
            data[rng.randrange(len(data))] = rng.getrandbits(8)
    elif how == "insert":
        pos = rng.randrange(len(data) + 1)
        data[pos:pos] = rng.choice((b"[", b"]", b"=", b'"', b"\n", b"\x00", b"'''", b"{", b"#"))
    elif how == "bom":
        data = bytearray(b"\xef\xbb\xbf") + data
    elif how == "latin":
        data += "\nnote = \"Zürich\"".encode("latin-1")
    return bytes(data)


def policy_file(seed: int) -> tuple[bytes, str]:
    """(file bytes, how it was made): a valid policy, a mutated one, or damaged text."""
    from core.policy import _KEYS

    rng = random.Random(f"policy:{seed}")
    d = _valid_policy(rng)
    how = rng.choice(("valid", "mutated", "mutated", "damaged", "random"))
    if how == "mutated":
        d = _mutate_dict(rng, d, _KEYS)
    if how == "random":
        return bytes(rng.getrandbits(8) for _ in range(rng.choice((0, 8, 200)))), how
    text = _toml_text(rng, d)
    if how == "damaged":
        return _mutate_text(rng, text), how
    return text.encode("utf-8"), how


def memo_fields_file(seed: int) -> tuple[bytes, str]:
    """(file bytes, how it was made) for the memo-fields TOML."""
    from core.memo_fields import DECISIONS, FIELDS, INDEPENDENCE, NESTED

    rng = random.Random(f"memo:{seed}")
    d: dict = {}
    for key in rng.sample(FIELDS, rng.randint(0, len(FIELDS))):
        d[key] = rng.choice(("", "Plain text", "<script>alert(1)</script>", "**bold** _it_ `c`",
                             "x" * 2000, "שלום עולם", "( ) \\ [ ]", "=1+2", "<para>p</para>"))
    if "validation_independence" in d:
        d["validation_independence"] = rng.choice(INDEPENDENCE + ("",))
    if rng.random() < 0.6:
        d["sign_off"] = {"name": "A. Reviewer", "decision": rng.choice(DECISIONS),
                         "date": rng.choice(("2025-07-01", "")), "role": "lead"}
    if rng.random() < 0.4:
        d["monitoring"] = {k: "quarterly" for k in NESTED["monitoring"]}
    how = rng.choice(("valid", "mutated", "mutated", "damaged", "random"))
    if how == "mutated":
        d = _mutate_dict(rng, d, {s: {k: None for k in ks} for s, ks in NESTED.items()})
        for _ in range(rng.randint(0, 3)):  # top-level fields
            key = rng.choice(FIELDS + ("unknown_field", "Title"))
            if rng.random() < 0.3:
                d.pop(key, None)
            else:
                d[key] = _odd_value(rng)
    if how == "random":
        return bytes(rng.getrandbits(8) for _ in range(rng.choice((0, 8, 200)))), how
    text = _toml_text(rng, d)
    if how == "damaged":
        return _mutate_text(rng, text), how
    return text.encode("utf-8"), how


def _paths(obj, prefix=()):
    """Every (path, value) of a JSON document, depth first."""
    yield prefix, obj
    if isinstance(obj, dict):
        for k, v in obj.items():
            yield from _paths(v, prefix + (k,))
    elif isinstance(obj, list):
        for i, v in enumerate(obj[:5]):
            yield from _paths(v, prefix + (i,))


def _json_value(rng: random.Random):
    return rng.choice((None, 0, 1, -1, 0.5, 1e308, "inf", "-inf", "nan", "", "x", True, False, [],
                       {}, [1, "a"], {"k": None}, "0" * 64, "g" * 64, 10**20, -0.0))


def record_file(seed: int, record: dict) -> tuple[bytes, str, set]:
    """(file bytes, how, sections changed) from a real decision record.

    ``how``: "valid", "edited" (values changed or removed, the integrity block
    left as it was: must be refused naming a changed section), "resealed"
    (edited, then the integrity block recomputed: the schema checks must
    catch a bad value), "damaged" (bytes), "random". ``sections``: the
    top-level keys whose content differs from the original's.
    """
    import copy
    import json

    from core.record import digest, dumps_record, seal

    rng = random.Random(f"record:{seed}")
    how = rng.choice(("valid", "edited", "edited", "resealed", "resealed", "damaged", "random"))
    if how == "random":
        return bytes(rng.getrandbits(8) for _ in range(rng.choice((0, 8, 300)))), how, set()
    rec = copy.deepcopy(record)
    if how in ("edited", "resealed"):
        for _ in range(rng.randint(1, 3)):
            paths = [p for p, _ in _paths(rec) if p and p[0] != "integrity"]
            path = rng.choice(paths)
            parent = rec
            for k in path[:-1]:
                parent = parent[k]
            if rng.random() < 0.15 and isinstance(parent, dict):
                del parent[path[-1]]
            else:
                parent[path[-1]] = _json_value(rng)
        if how == "resealed":
            rec = seal(rec)
    sections = {k for k in record if k != "integrity" and (k not in rec or digest(rec[k]) != digest(record[k]))}
    text = dumps_record(rec) if how != "damaged" else json.dumps(rec, indent=2)
    if how == "damaged":
        return _mutate_text(rng, text), how, sections
    return text.encode("utf-8"), how, sections
