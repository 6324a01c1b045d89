"""File intake: reading, mapping, checks, warnings and the fingerprint.

Every bad-file case is checked with its exact message. Row numbers in the
messages are 1-based data rows (the header excluded). Unless a test names
another source, what it checks is Fulcrum's own contract (common practice, no
source); the files are built in the test, in memory.
"""

from __future__ import annotations

import builtins
import gzip
import io
import math
import re
import zipfile

import numpy as np
import openpyxl
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from core.dataset import Dataset, Mapping
from core.errors import InputError
from core.intake import (
    LARGE_CLUSTER_ROWS,
    WARNING_CODES,
    label_values,
    load_count_table,
    load_dataset,
    suggest_mapping,
)
from core.reading import read_table

M = {"score": "score", "label": "label", "positive_label": 1}


def csv(*lines: str) -> bytes:
    return ("\n".join(lines) + "\n").encode("utf-8")


def message(data, mapping=M, **kw) -> str:
    with pytest.raises(InputError) as exc:
        load_dataset(data, mapping, **kw)
    return str(exc.value)


def read_message(data, **kw) -> str:
    with pytest.raises(InputError) as exc:
        read_table(data, **kw)
    return str(exc.value)


def codes(ds) -> list[str]:
    return [w.code for w in ds.warnings]


def xlsx(rows, sheets=None) -> bytes:
    wb = openpyxl.Workbook()
    ws = wb.active
    ws.title = "Scores"
    for r in rows:
        ws.append(list(r))
    for name, extra in (sheets or {}).items():
        s = wb.create_sheet(name)
        for r in extra:
            s.append(list(r))
    buf = io.BytesIO()
    wb.save(buf)
    return buf.getvalue()


def parquet(frame: pd.DataFrame) -> bytes:
    buf = io.BytesIO()
    frame.to_parquet(buf, index=False)
    return buf.getvalue()


def balanced(n_events: int = 100, n_non: int = 100) -> pd.DataFrame:
    """A clean table with enough events that no warning is due."""
    rng = np.random.default_rng(7)
    y = np.r_[np.ones(n_events, dtype=int), np.zeros(n_non, dtype=int)]
    return pd.DataFrame({"score": np.round(rng.random(y.size), 6), "label": y})


# =========================================================================== reading: empty files


def test_empty_file():
    assert read_message(b"") == "The file is empty (no header and no data rows)"
    assert (
        read_message(b"  \n\n", file_name="a.csv") == "a.csv is empty (no header and no data rows)"
    )


def test_header_only_csv():
    assert (
        read_message(csv("score,label"), file_name="a.csv") == "a.csv has a header but no data rows"
    )


def test_header_only_parquet():
    data = parquet(
        pd.DataFrame({"score": pd.Series([], dtype=float), "label": pd.Series([], dtype=int)})
    )
    assert read_message(data, file_name="p.parquet") == "p.parquet has a header but no data rows"


def test_header_only_and_empty_excel_sheets():
    data = xlsx([("score", "label")], sheets={"Blank": []})
    assert (
        read_message(data, file_name="w.xlsx")
        == "w.xlsx has a header but no data rows in sheet 'Scores'"
    )
    assert (
        read_message(data, file_name="w.xlsx", sheet="Blank")
        == "w.xlsx has nothing in sheet 'Blank' (no header and no data rows)"
    )


# =========================================================================== reading: structure


def test_duplicate_column_names_csv():
    assert (
        read_message(csv("score,label,score", "0.1,1,0.2"))
        == "score: appears 2 times in the header (columns 1 and 3). Give every column its own name"
    )


def test_duplicate_column_names_excel():
    data = xlsx([("label", "score", "score", "score"), (1, 0.1, 0.2, 0.3)])
    assert (
        read_message(data)
        == "score: appears 3 times in the header (columns 2, 3 and 4). Give every column its own name"
    )


def test_duplicate_column_names_parquet():
    table = pa.table(
        [pa.array([0.1, 0.2]), pa.array([0, 1]), pa.array([1, 2])],
        names=["score", "label", "label"],
    )
    buf = io.BytesIO()
    pq.write_table(table, buf)
    assert (
        read_message(buf.getvalue())
        == "label: appears 2 times in the header (columns 2 and 3). Give every column its own name"
    )


def test_rows_with_the_wrong_number_of_fields():
    data = csv("score,label", "0.1,1", "0.2,0,7", "0.3,0", "0.4", "0.5,1")
    assert read_message(data, file_name="a.csv") == (
        "a.csv has rows with 1 or 3 fields where the header has 2 (2 rows: rows 2, 4). Check the "
        "delimiter and quoting (a delimiter inside an unquoted value splits it)"
    )


def test_old_xls_and_wrong_content():
    assert (
        read_message(b"\xd0\xcf\x11\xe0\xa1\xb1\x1a\xe1" + b"\0" * 64, file_name="old.xls")
        == "old.xls is an old Excel 97-2003 workbook (.xls), which Fulcrum does not read. Save it as .xlsx or CSV"
    )
    assert (
        read_message(csv("score,label", "0.1,1"), file_name="a.parquet")
        == "a.parquet has the extension .parquet but its content is not a Parquet file"
    )
    assert read_message(b"PK\x03\x04" + b"junk" * 10, file_name="a.xlsx").startswith(
        "a.xlsx is a ZIP archive but not an Excel workbook Fulcrum can read"
    )


def test_binary_garbage_is_not_a_text_table():
    assert read_message(b"\x89PNG\r\n\x1a\n\x00\x00\x00\rIHDR", file_name="x.png") == (
        "x.png does not look like a text table (it holds NUL bytes). Fulcrum reads CSV or TSV text, "
        "Parquet and Excel .xlsx; for UTF-16 text without a byte-order mark choose encoding='utf-16'"
    )


def test_source_kinds_agree(tmp_path):
    data = balanced().to_csv(index=False).encode()
    path = tmp_path / "scores.csv"
    path.write_bytes(data)
    fps = {load_dataset(src, M).fingerprint for src in (data, io.BytesIO(data), str(path), path)}
    with open(path, "rb") as fh:
        fps.add(load_dataset(fh, M).fingerprint)
    assert len(fps) == 1
    with open(path, encoding="utf-8") as fh, pytest.raises(InputError) as exc:
        read_table(fh)
    assert str(exc.value) == (
        "scores.csv was opened in text mode; open it in binary mode ('rb') or pass its bytes"
    )
    assert read_message(tmp_path / "nope.csv") == f"{tmp_path / 'nope.csv'}: no such file"


def test_nothing_is_written_while_reading(monkeypatch):
    """Uploads are read from bytes: no file is opened for writing on the way."""
    frames = balanced()
    payloads = {
        "csv": frames.to_csv(index=False).encode(),
        "parquet": parquet(frames),
        "excel": xlsx([("score", "label")] + list(frames.itertuples(index=False))),
    }
    real_open = builtins.open
    opened = []

    def guarded(file, mode="r", *a, **k):
        opened.append((file, mode))
        if any(c in mode for c in "wax+"):
            raise AssertionError(f"opened {file!r} for writing")
        return real_open(file, mode, *a, **k)

    monkeypatch.setattr(builtins, "open", guarded)
    monkeypatch.setattr(io, "open", guarded)
    for name, data in payloads.items():
        ds = load_dataset(data, M, file_name=f"x.{'xlsx' if name == 'excel' else name}")
        assert ds.n_rows == 200
    assert not [o for o in opened if any(c in o[1] for c in "wax+")]


# =========================================================================== reading: delimiters, decimals


def test_european_csv_semicolon_decimal_comma_thousands():
    data = csv("score;label;amount", "0,35;1;1.234,50", "0,1;0;12,00", "0,875;0;7.000,25")
    raw = read_table(data, file_name="eu.csv")
    assert (raw.info.delimiter, raw.info.decimal, raw.info.thousands) == (";", ",", ".")
    # reference: pandas' C parser with the separators named explicitly
    ref = pd.read_csv(io.BytesIO(data), sep=";", decimal=",", thousands=".")
    ds = load_dataset(raw, {**M, "case_cost": "amount"})
    np.testing.assert_array_equal(ds.y_score, ref["score"].to_numpy())
    np.testing.assert_array_equal(ds.case_cost, ref["amount"].to_numpy())
    np.testing.assert_array_equal(ds.y_true, ref["label"].to_numpy() == 1)
    assert (
        "Decimal comma detected (e.g. 0,35 is read as 0.35), with '.' as thousands separator."
        in raw.info.notes
    )


def test_european_csv_read_with_a_decimal_point_says_what_to_change():
    data = csv("score;label", "0,35;1", "0,1;0")
    assert message(data, decimal=".") == (
        "score: holds values that are not numbers, e.g. '0,35', '0,1' (2 rows: rows 1, 2). They look "
        "like numbers written with a decimal comma: choose decimal=','"
    )


def test_wrong_delimiter_says_which_to_choose():
    data = csv("score;label", "0,35;1", "0,1;0")
    assert message(data, delimiter=",") == (
        "score: is mapped as the score but is not a column of the file; its columns are "
        "'score;label'. The file was read as one column; its header contains semicolons, so choose "
        "delimiter=';'"
    )


def test_quoted_decimal_commas_in_a_comma_file():
    ds = load_dataset(csv("score,label", '"0,5",1', '"0,25",0'), M)
    np.testing.assert_array_equal(ds.y_score, [0.5, 0.25])


def test_tsv_pipe_and_gzip():
    frame = balanced()
    tsv = frame.to_csv(index=False, sep="\t").encode()
    pipe = frame.to_csv(index=False, sep="|").encode()
    comma = frame.to_csv(index=False).encode()
    raw_tsv = read_table(tsv, file_name="s.tsv")
    assert (raw_tsv.info.format, raw_tsv.info.delimiter) == ("tsv", "\t")
    raw_pipe = read_table(pipe)
    assert (
        raw_pipe.info.delimiter == "|" and "Delimiter detected: pipe ('|')." in raw_pipe.info.notes
    )
    raw_gz = read_table(gzip.compress(comma), file_name="s.csv.gz")
    assert raw_gz.info.compression == "gzip"
    fps = {load_dataset(r, M).fingerprint for r in (raw_tsv, raw_pipe, raw_gz, read_table(comma))}
    assert len(fps) == 1


def test_header_quirks():
    # blank lines before the header, a quoted newline in a name, unnamed and spaced names
    raw = read_table(b'\n\n"risk\nscore", label ,\n0.1,1,a\n0.2,0,b\n')
    assert raw.columns == ["risk\nscore", "label", "column 3"]
    assert raw.frame["risk\nscore"].tolist() == [0.1, 0.2]
    assert "Spaces around 1 column name(s) were removed." in raw.info.notes
    assert "1 column(s) had no name in the header and are called 'column N' by their position." in (
        raw.info.notes
    )
    # two unnamed columns: mapped by their position names
    ds = load_dataset(b",,score,label\n1,2,0.5,1\n3,4,0.6,0\n", {**M, "groups": ["column 2"]})
    assert ds.groups["column 2"].tolist() == ["2", "4"]


def test_ids_with_leading_zeros_stay_text():
    data = csv("pid,score,label", "00123,0.1,1", "0123,0.2,0", "123,0.3,0")
    raw = read_table(data)
    assert "Column 'pid' keeps its leading zeros (read as text, not numbers)." in raw.info.notes
    ds = load_dataset(data, {**M, "cluster": "pid"})
    assert ds.cluster.tolist() == ["00123", "0123", "123"]  # three patients, not one


def test_spreadsheet_sep_line():
    raw = read_table(csv("sep=;", "score;label", "0,5;1", "0,25;0"))
    assert raw.info.delimiter == ";" and raw.columns == ["score", "label"]
    assert raw.frame["score"].tolist() == [0.5, 0.25]
    assert "The first line names the delimiter (sep=;)." in raw.info.notes


def test_decimal_same_as_delimiter_needs_quotes():
    assert read_message(csv("score,label", "0,5"), decimal=",", delimiter=",") == (
        "decimal: is the same character as the delimiter (',') and the values are not quoted. Choose "
        "another delimiter or decimal mark"
    )


# =========================================================================== reading: encodings


def test_utf8_bom():
    plain = balanced().to_csv(index=False).encode()
    raw = read_table(b"\xef\xbb\xbf" + plain)
    assert raw.info.encoding == "utf-8-sig" and raw.columns == ["score", "label"]
    assert load_dataset(raw, M).fingerprint == load_dataset(plain, M).fingerprint


def test_utf16_with_bom():
    text = balanced().to_csv(index=False)
    raw = read_table(text.encode("utf-16"))
    assert raw.info.encoding == "utf-16"
    assert load_dataset(raw, M).fingerprint == load_dataset(text.encode(), M).fingerprint


def test_windows_1252_fallback_is_stated():
    data = "score,label,ward\n0.2,1,Café\n0.1,0,Nord\n".encode("cp1252")
    ds = load_dataset(data, {**M, "groups": ["ward"]})
    assert list(ds.groups["ward"]) == ["Café", "Nord"]
    note = (
        "The file is not valid UTF-8 (first non-UTF-8 byte in data row 1); it was read as "
        "Windows-1252 (cp1252). If accented letters look wrong, choose its encoding."
    )
    assert note in ds.read_notes
    w = [w for w in ds.warnings if w.code == "encoding_fallback"]
    assert len(w) == 1 and w[0].message == note


def test_undecodable_text_names_the_row():
    data = b"score,label,ward\n0.2,1,A\n0.1,0,\x81\x8d\n"
    assert read_message(data) == (
        "The file is not UTF-8 text (first undecodable byte in data row 2) and not Windows-1252 "
        "either. Save it as UTF-8, or choose its encoding (encoding='...')"
    )
    ds = load_dataset(data, {**M, "groups": ["ward"]}, encoding="latin-1")
    assert ds.groups["ward"][1] == "\x81\x8d"
    assert "Read with the encoding latin-1, as chosen." in ds.read_notes
    assert (
        read_message(data, encoding="no-such-codec")
        == "encoding: 'no-such-codec' is not an encoding Python knows"
    )


# =========================================================================== reading: Excel


def test_excel_formula_without_saved_result_is_reported():
    # openpyxl writes formulas without a cached result, exactly the case to report
    rows = [("score", "label", "double")] + [(i / 10, i % 2, f"=A{i + 2}*2") for i in range(5)]
    data = xlsx(rows)
    raw = read_table(data, file_name="f.xlsx")
    assert raw.info.formula_cells == {"double": (0, 1, 2, 3, 4)}
    assert (
        "5 formula cell(s) have no saved result (in 'double'); they are not read as empty."
        in raw.info.notes
    )
    assert message(data, {**M, "score": "double"}, file_name="f.xlsx") == (
        "double: holds formulas without a saved result (the workbook was written by a program that "
        "does not calculate formulas) (5 rows: rows 1, 2, 3, 4, 5). Open and save it in a spreadsheet "
        "program, or export the sheet to CSV"
    )
    ds = load_dataset(raw, M)  # an unmapped formula column does not stop the load
    np.testing.assert_array_equal(ds.y_score, [0.0, 0.1, 0.2, 0.3, 0.4])


def _with_cached_values(data: bytes, values: dict[str, str]) -> bytes:
    """Write cached results into openpyxl's empty <v/> of the given cells (as a spreadsheet program does)."""
    src = zipfile.ZipFile(io.BytesIO(data))
    out = io.BytesIO()
    with zipfile.ZipFile(out, "w") as dst:
        for item in src.infolist():
            body = src.read(item.filename)
            if item.filename == "xl/worksheets/sheet1.xml":
                text = body.decode()
                for ref, v in values.items():
                    text, n = re.subn(
                        rf'(<c r="{ref}"[^>]*>\s*<f>[^<]*</f>)\s*<v\s*/>', rf"\1<v>{v}</v>", text
                    )
                    if n == 0:
                        text, n = re.subn(
                            rf'(<c r="{ref}"[^>]*>\s*<f>[^<]*</f>)\s*<v>\s*</v>',
                            rf"\1<v>{v}</v>",
                            text,
                        )
                    assert n == 1, ref
                body = text.encode()
            dst.writestr(item, body)
    return out.getvalue()


def test_excel_formula_with_saved_result_is_read():
    rows = [("score", "label")] + [(f"=0.{i + 1}*1", i % 2) for i in range(3)]
    data = _with_cached_values(xlsx(rows), {"A2": "0.1", "A3": "0.2", "A4": "0.3"})
    raw = read_table(data)
    assert raw.info.formula_cells == {}
    np.testing.assert_array_equal(load_dataset(raw, M).y_score, [0.1, 0.2, 0.3])


def test_excel_sheets():
    data = xlsx(
        [("score", "label"), (0.9, 1), (0.1, 0)],
        sheets={"Quarter 2": [("score", "label"), (0.7, 1), (0.6, 0), (0.2, 0)]},
    )
    raw = read_table(data)
    assert raw.info.sheet == "Scores" and raw.info.sheet_names == ("Scores", "Quarter 2")
    assert load_dataset(data, M, sheet="quarter 2").n_rows == 3
    assert load_dataset(data, M, sheet=1).n_rows == 3
    assert (
        read_message(data, sheet="Q3")
        == "sheet: the workbook has no sheet named 'Q3'; its sheets are 'Scores', 'Quarter 2'"
    )
    assert (
        read_message(data, sheet=5)
        == "sheet: number 5 is out of range; the workbook has 2 sheet(s): 'Scores', 'Quarter 2'"
    )
    assert (
        "Ignored for a text file: sheet."
        in read_table(csv("score,label", "0.1,1"), sheet="x").info.notes
    )


def test_excel_error_cells_are_not_numbers():
    data = xlsx([("score", "label"), (0.5, 1), ("#DIV/0!", 0), (0.25, 0)])
    assert (
        message(data) == "score: holds values that are not numbers, e.g. '#DIV/0!' (1 row: row 2)"
    )


# =========================================================================== checks: score


def test_non_numeric_scores():
    data = csv("score,label", "0.1,1", "abc,0", "0.3,0", "n.a.,1", "0.5,0")
    assert (
        message(data)
        == "score: holds values that are not numbers, e.g. 'abc', 'n.a.' (2 rows: rows 2, 4)"
    )


def test_missing_scores():
    data = csv("score,label", "0.1,1", ",0", "NA,0", "0.4,1")
    assert message(data) == (
        "score: has missing values (2 rows: rows 2, 3). Fill them in, or choose to drop rows with a "
        "missing score (the count is reported in the memo)"
    )


def test_drop_missing_scores_reports_the_count():
    data = csv("score,label", "0.1,1", ",0", "0.2,0", "NA,1", "0.4,1", "0.3,0")
    ds = load_dataset(data, {**M, "drop_missing_scores": True})
    assert ds.dropped_rows == 2 and ds.dropped_positions == (2, 4)
    assert ds.source_rows == 6 and ds.n_rows == 4
    np.testing.assert_array_equal(ds.y_score, [0.1, 0.2, 0.4, 0.3])
    np.testing.assert_array_equal(ds.y_true, [True, False, True, False])
    w = [w for w in ds.warnings if w.code == "dropped_missing_scores"]
    assert w[0].message == (
        "score: 2 rows with a missing score were dropped as chosen (rows 2, 4); "
        "the analysis uses the other 4 rows"
    )
    assert ds.mapping.drop_missing_scores is True


def test_dropped_rows_do_not_count_in_other_checks():
    # a footer row without a score carries a third label value; dropped, it is not a label problem
    data = csv("score,label,site", "0.1,1,A", "0.2,0,B", "0.3,0,A", ",Total,")
    ds = load_dataset(data, {**M, "drop_missing_scores": True, "groups": ["site"]})
    assert ds.dropped_rows == 1 and "group_missing" not in codes(ds)
    # the fingerprint of the kept rows is the one computed from their arrays afresh
    fresh = Dataset(
        kind="rows", mapping=ds.mapping, y_score=ds.y_score, y_true=ds.y_true, groups=ds.groups
    ).with_fingerprint()
    assert fresh.fingerprint == ds.fingerprint


def test_infinite_scores():
    assert (
        message(csv("score,label", "0.1,1", "inf,0"))
        == "score: holds infinite values (1 row: row 2). Every score must be a finite number"
    )


def test_all_scores_missing_with_drop():
    assert (
        message(csv("score,label", ",1", ",0"), {**M, "drop_missing_scores": True})
        == "score: has no values at all (every row is missing its score)"
    )


# =========================================================================== checks: label


def test_label_with_one_value():
    assert (
        message(csv("score,label", "0.1,0", "0.2,0"))
        == "label: has only one value (0 (2 rows)); it needs exactly two: the event and the non-event"
    )


def test_label_with_three_values():
    data = csv("score,label", "0.1,0", "0.2,1", "0.3,2", "0.4,1", "0.5,0", "0.6,0")
    assert message(data) == (
        "label: has 3 distinct values (0 (3 rows), 1 (2 rows) and 2 (1 row)); it needs exactly two: "
        "the event and the non-event (1 row: row 3). Recode it to two values, or choose another label "
        "column"
    )


def test_missing_labels():
    assert message(csv("score,label", "0.1,0", "0.2,", "0.3,1", "0.4,NA")) == (
        "label: has missing values (2 rows: rows 2, 4). Every case needs a label; fill them in or "
        "remove those rows"
    )


def test_event_value_absent():
    data = csv("score,outcome", "0.1,no", "0.2,yes", "0.3,no")
    assert (
        message(data, {"score": "score", "label": "outcome", "positive_label": "maybe"})
        == "outcome: has no value matching the event value 'maybe'; its values are 'no' (2 rows) and 'yes' (1 row)"
    )


def test_event_value_not_given():
    data = csv("score,outcome", "0.1,no", "0.2,yes", "0.3,no")
    assert (
        message(data, {"score": "score", "label": "outcome"})
        == "outcome: needs an event value: which of its values ('no' (2 rows) and 'yes' (1 row)) marks the event?"
    )


def test_yes_no_labels():
    data = csv("score,outcome", "0.1,no", "0.2,yes", "0.3,no", "0.9,yes")
    fps = set()
    for pos in ("yes", "Yes", " YES "):
        ds = load_dataset(data, {"score": "score", "label": "outcome", "positive_label": pos})
        np.testing.assert_array_equal(ds.y_true, [False, True, False, True])
        assert ds.mapping.positive_label == "yes"
        fps.add(ds.fingerprint)
    assert len(fps) == 1
    ds_no = load_dataset(data, {"score": "score", "label": "outcome", "positive_label": "no"})
    np.testing.assert_array_equal(ds_no.y_true, [True, False, True, False])
    assert ds_no.fingerprint not in fps


def test_one_two_codes():
    data = csv("score,code", "0.1,1", "0.2,2", "0.3,1", "0.8,2")
    a = load_dataset(data, {"score": "score", "label": "code", "positive_label": "2"})
    b = load_dataset(data, {"score": "score", "label": "code", "positive_label": 2})
    c = load_dataset(data, {"score": "score", "label": "code", "positive_label": 2.0})
    np.testing.assert_array_equal(a.y_true, [False, True, False, True])
    assert a.mapping.positive_label == 2 and isinstance(a.mapping.positive_label, int)
    assert a.fingerprint == b.fingerprint == c.fingerprint


def test_other_label_codings():
    zero_one = csv("score,label", "0.1,0.0", "0.2,1.0")
    assert load_dataset(zero_one, {**M, "positive_label": "1"}).y_true.tolist() == [False, True]
    flags = csv("score,label", "0.1,False", "0.2,True")
    for pos in ("yes", "true", True, 1):
        assert load_dataset(flags, {**M, "positive_label": pos}).y_true.tolist() == [False, True]
    words = csv("score,diagnosis", "0.1,Benign", "0.9,Malignant")
    ds = load_dataset(
        words, {"score": "score", "label": "diagnosis", "positive_label": "malignant"}
    )
    assert ds.y_true.tolist() == [False, True] and ds.mapping.positive_label == "Malignant"


def test_label_values_for_the_app():
    raw = read_table(csv("score,outcome", "0.1,no", "0.2, yes", "0.3,no", "0.4,", "0.5,no"))
    vals = label_values(raw, "outcome")
    assert vals["text"].tolist() == ["no", "yes", ""]
    assert vals["rows"].tolist() == [3, 1, 1]
    assert vals["missing"].tolist() == [False, False, True]
    assert vals["value"].tolist()[:2] == ["no", "yes"]


def test_label_whitespace_is_merged_with_a_warning():
    ds = load_dataset(
        csv("score,label", "0.1,yes", "0.2,yes ", "0.3,no"), {**M, "positive_label": "yes"}
    )
    assert ds.y_true.tolist() == [True, True, False]
    w = [w for w in ds.warnings if w.code == "label_whitespace"]
    assert (
        w[0].message == "label: values that differed only by surrounding spaces were taken as one"
    )


# =========================================================================== checks: other columns


def test_negative_and_missing_weights():
    mp = {**M, "weight": "w", "weight_kind": "frequency"}
    assert (
        message(csv("score,label,w", "0.1,0,1", "0.2,1,-2", "0.3,0,-1"), mp)
        == "w: holds negative weights (2 rows: rows 2, 3)"
    )
    assert (
        message(csv("score,label,w", "0.1,0,1", "0.2,1,"), mp)
        == "w: has missing values (1 row: row 2)"
    )
    assert (
        message(csv("score,label,w", "0.1,0,1", "0.2,1,2"), {**M, "weight": "w"})
        == "weight_kind: must be 'frequency' or 'sampling' when a weight column is chosen, got None"
    )
    assert (
        message(csv("score,label,w", "0.1,0,0", "0.2,1,2"), mp)
        == "w: gives the non-events a total weight of zero; both classes need positive weight"
    )


def test_frequency_weights_count_events():
    data = csv("score,label,w", "0.1,0,300", "0.2,1,150", "0.3,0,2")
    ds = load_dataset(data, {**M, "weight": "w", "weight_kind": "frequency"})
    assert "few_events" not in codes(ds)
    ds = load_dataset(data, {**M, "weight": "w", "weight_kind": "sampling"})
    assert "few_events" in codes(ds)


def test_unparseable_times():
    mp = {**M, "score_time": "t"}
    assert message(csv("score,label,t", "0.1,0,2025-01-01 10:00", "0.2,1,yesterday"), mp) == (
        "t: holds values that are not dates or times, e.g. 'yesterday' (1 row: row 2). Write times as "
        "ISO 8601, e.g. 2025-03-01 14:30"
    )
    assert (
        message(csv("score,label,t", "0.1,0,2025-01-01 10:00", "0.2,1,"), mp)
        == "t: has missing values (1 row: row 2). Every case needs a time"
    )
    assert message(csv("score,label,t", "0.1,0,5", "0.2,1,6"), mp) == (
        "t: holds numbers, not dates or times (2 rows: rows 1, 2). Write times as ISO 8601, e.g. "
        "2025-03-01 14:30 (an Excel column formatted as dates is read as dates)"
    )


def test_day_first_dates_are_read_when_the_first_value_is_ambiguous():
    # Source: common practice, no source -- European exports write 02/01/2025 for 2 January;
    # read month first, every later day above 12 would fail, so the day-first reading wins.
    data = csv("score,label,t", "0.1,0,02/01/2025 09:00", "0.2,1,13/01/2025 14:30",
               "0.3,0,31/12/2024 23:59")
    ds = load_dataset(data, {**M, "score_time": "t"})
    np.testing.assert_array_equal(
        ds.score_time,
        np.array(["2025-01-02T09:00", "2025-01-13T14:30", "2024-12-31T23:59"],
                 dtype="datetime64[ns]"),
    )
    us = csv("score,label,t", "0.1,0,01/13/2025", "0.2,1,02/01/2025")  # month first: kept
    np.testing.assert_array_equal(
        load_dataset(us, {**M, "score_time": "t"}).score_time,
        np.array(["2025-01-13", "2025-02-01"], dtype="datetime64[ns]"),
    )


def test_dates_that_read_both_ways_are_read_month_first_with_a_warning():
    # Source: common practice, no source -- 02/01/2025 is 1 February month first and 2 January
    # day first; with no day above 12 the file cannot say which, so the intake says what it did.
    data = csv("score,label,t", "0.1,0,02/01/2025", "0.2,1,03/04/2025", "0.3,0,12/12/2024")
    ds = load_dataset(data, {**M, "score_time": "t"})
    np.testing.assert_array_equal(
        ds.score_time, np.array(["2025-02-01", "2025-03-04", "2024-12-12"], dtype="datetime64[ns]"))
    (w,) = [w for w in ds.warnings if w.code == "ambiguous_dates"]
    assert w.column == "t" and w.message == (
        "t: every date can be read month first or day first (no day is above 12); they were read "
        "month first (02/01/2025 as 2025-02-01). If they are day first, write them as ISO 8601 "
        "(YYYY-MM-DD) and load the file again")
    # no warning when the readings agree, when a day is above 12 (either way), or for ISO dates
    for rows in (("0.1,0,01/01/2025", "0.2,1,12/12/2025"),
                 ("0.1,0,02/01/2025", "0.2,1,13/01/2025"),
                 ("0.1,0,01/13/2025", "0.2,1,02/01/2025"),
                 ("0.1,0,2025-02-01", "0.2,1,2025-03-04")):
        ds = load_dataset(csv("score,label,t", *rows), {**M, "score_time": "t"})
        assert not [w for w in ds.warnings if w.code == "ambiguous_dates"], rows


def test_times_with_a_time_zone_become_utc():
    data = csv("score,label,t", "0.1,0,2025-01-01T10:00:00+02:00", "0.2,1,2025-01-01T09:30:00Z")
    ds = load_dataset(data, {**M, "score_time": "t"})
    np.testing.assert_array_equal(
        ds.score_time,
        np.array(["2025-01-01T08:00:00", "2025-01-01T09:30:00"], dtype="datetime64[ns]"),
    )


def test_case_costs():
    mp = {**M, "case_cost": "c"}
    assert (
        message(csv("score,label,c", "0.1,1,5", "0.2,1,-1", "0.3,0,"), mp)
        == "c: holds negative amounts (1 row: row 2)"
    )
    assert (
        message(csv("score,label,c", "0.1,1,", "0.2,0,3"), mp)
        == "c: has missing values for events (1 row: row 1)"
    )
    assert (
        message(csv("score,label,c", "0.1,1,5", "0.2,0,lots"), mp)
        == "c: holds values that are not numbers, e.g. 'lots' (1 row: row 2)"
    )
    ds = load_dataset(csv("score,label,c", "0.1,1,5", "0.2,0,", "0.3,0,-4"), mp)
    np.testing.assert_array_equal(ds.case_cost, [5.0, np.nan, -4.0])


def test_clusters():
    assert message(csv("score,label,pid", "0.1,1,a", "0.2,0,"), {**M, "cluster": "pid"}) == (
        "pid: has missing values (1 row: row 2). Every case needs its cluster id (patient or customer); "
        "or map no cluster column"
    )
    ds = load_dataset(
        csv("score,label,pid", "0.1,1,7", "0.2,0,7.0", "0.3,0, 8"), {**M, "cluster": "pid"}
    )
    assert ds.cluster.tolist() == ["7", "7", "8"]


# =========================================================================== mapping errors


def test_mapping_errors():
    data = csv("score,label,other", "0.1,1,2", "0.2,0,3")
    assert message(data, {**M, "label": "outcome"}) == (
        "outcome: is mapped as the label but is not a column of the file; its columns are 'score', "
        "'label', 'other'"
    )
    assert (
        message(data, {**M, "weight": "score", "weight_kind": "frequency"})
        == "score: is mapped as both the score and the weight; each needs its own column"
    )
    assert (
        message(data, {**M, "groups": ["label"]})
        == "label: is the label; it cannot also be a group column"
    )
    assert (
        message(data, {**M, "groups": ["other", "other"]})
        == "other: is listed twice among the group columns"
    )
    assert message(data, {**M, "kind": "table"}) == "kind: must be 'rows' or 'counts', got 'table'"
    assert (
        message(data, {**M, "events": "other"})
        == "events: belongs to a count table, but the mapping is for rows (kind='rows')"
    )
    assert message(data, {"score": "score", "label": None}) == "label: no label column is chosen"
    assert message(data, {**M, "typo": 1}).startswith(
        "mapping: has unknown field(s) typo; known fields are"
    )
    assert (
        message(data, {**M, "outcome_time": "other", "outcome_horizon_days": -2})
        == "outcome_horizon_days: must be a positive number of days, got -2"
    )


def test_horizon_without_outcome_time_is_dropped_from_the_mapping():
    data = csv("score,label,t", "0.1,1,2025-01-01", "0.2,0,2025-01-02")
    ds = load_dataset(data, {**M, "score_time": "t", "outcome_horizon_days": 30})
    assert ds.mapping.outcome_horizon_days is None
    assert ds.fingerprint == load_dataset(data, {**M, "score_time": "t"}).fingerprint


# =========================================================================== count tables

COUNTS = {"kind": "counts", "score": "s", "events": "e", "non_events": "n"}


def test_count_table():
    data = csv("s,e,n,site", "0.9,60,40,A", "0.5,50,150,B", "0.1,10,900,A")
    ds = load_count_table(
        data, {"score": "s", "events": "e", "non_events": "n", "groups": ["site"]}
    )
    assert ds.kind == "counts" and ds.n_event_rows == 120 and ds.n_rows == 1210
    np.testing.assert_array_equal(ds.events, [60, 50, 10])
    assert ds.groups["site"].tolist() == ["A", "B", "A"]
    assert codes(ds) == []
    # the same cases as rows give the same curve
    rows = pd.DataFrame(
        {
            "score": np.repeat([0.9, 0.5, 0.1, 0.9, 0.5, 0.1], [60, 50, 10, 40, 150, 900]),
            "label": np.repeat([1, 1, 1, 0, 0, 0], [60, 50, 10, 40, 150, 900]),
        }
    )
    rc = load_dataset(rows.to_csv(index=False).encode(), M).curve()
    np.testing.assert_array_equal(ds.curve().tp, rc.tp)
    np.testing.assert_array_equal(ds.curve().fp, rc.fp)


def test_count_table_errors():
    assert (
        message(csv("s,e,n", "0.1,0,5", "0.2,0,2"), COUNTS)
        == "e: sums to zero: the table holds no events; both classes are needed"
    )
    assert (
        message(csv("s,e,n", "0.1,-1,5", "0.2,3,2"), COUNTS)
        == "e: holds negative counts (1 row: row 1)"
    )
    assert (
        message(csv("s,e,n", "0.1,1,", "0.2,3,2"), COUNTS) == "n: has missing values (1 row: row 1)"
    )
    assert (
        message(csv("s,e,n,y", "0.1,1,1,0", "0.2,3,2,1"), {**COUNTS, "label": "y"})
        == "label: is a per-case column, but the mapping is for a count table (kind='counts')"
    )
    assert message(csv("s,e", "0.1,1"), {"kind": "counts", "score": "s", "events": "e"}) == (
        "non_events: no column is chosen; a count table needs the score, the event count and the "
        "non-event count"
    )
    ds = load_dataset(csv("s,e,n", "0.1,1,5", "0.2,3,2"), COUNTS)
    assert [w.message for w in ds.warnings if w.code == "few_events"] == [
        "e: only 4 events; validation studies want at least 100 (Collins et al., Stat Med 2016), so "
        "every estimate here is uncertain"
    ]


# =========================================================================== warnings


def test_scores_outside_unit_interval():
    frame = balanced()
    frame.loc[0, "score"] = -2.5
    frame.loc[1, "score"] = 4.0
    ds = load_dataset(frame.to_csv(index=False).encode(), M)
    assert [w.message for w in ds.warnings] == [
        "score: 2 scores lie outside [0, 1] (from -2.5 to 4), so the scores are not probabilities: "
        "calibration, probability thresholds and net benefit stay off"
    ]
    assert not ds.scores_in_unit_interval


def test_few_events():
    # Collins et al., Stat Med 2016 (from memory): validation studies want at least 100 events
    ds = load_dataset(balanced(99, 200).to_csv(index=False).encode(), M)
    assert [w.message for w in ds.warnings] == [
        "label: only 99 events; validation studies want at least 100 (Collins et al., Stat Med 2016), "
        "so every estimate here is uncertain"
    ]
    assert codes(load_dataset(balanced(100, 200).to_csv(index=False).encode(), M)) == []


def test_float32_scores_from_parquet():
    frame = balanced()
    frame["score"] = frame["score"].astype(np.float32)
    ds = load_dataset(parquet(frame), M)
    assert ds.source_float32
    assert [w.message for w in ds.warnings] == [
        "score: the source stores the scores as 32-bit floats (about 7 significant digits); they are "
        "used as float64, and scores closer than that precision may be tied"
    ]
    np.testing.assert_array_equal(ds.y_score, frame["score"].to_numpy().astype(np.float64))


def test_large_clusters():
    frame = balanced()
    frame["pid"] = [f"P{i % 150}" for i in range(200)]
    frame.loc[:LARGE_CLUSTER_ROWS, "pid"] = "P999"  # LARGE_CLUSTER_ROWS + 1 rows
    ds = load_dataset(frame.to_csv(index=False).encode(), {**M, "cluster": "pid"})
    assert [w.message for w in ds.warnings] == [
        "pid: 1 cluster holds more than 10 rows (the largest 11 rows; 151 clusters in all); cases in a "
        "cluster are not independent, so intervals should resample whole clusters"
    ]


def test_group_missing_and_outcome_warnings():
    data = csv(
        "score,label,site,st,ot",
        "0.1,1,A,2025-01-01 10:00,2025-01-05 10:00",
        "0.2,0,,2025-01-01 10:00,",
        "0.3,1,B,2025-01-02 10:00,2025-01-01 10:00",
        "0.4,1,A,2025-01-02 10:00,",
    )
    ds = load_dataset(
        data,
        {
            **M,
            "groups": ["site"],
            "score_time": "st",
            "outcome_time": "ot",
            "outcome_horizon_days": 2,
        },
    )
    got = {w.code: w.message for w in ds.warnings}
    assert (
        got["group_missing"]
        == "site: 1 row has no value (row 2); it is kept with the group value missing"
    )
    assert got["outcome_time_missing"] == "ot: 1 event has no outcome time (row 4)"
    assert (
        got["outcome_before_score"]
        == "ot: 1 row has an outcome time earlier than the score time (row 3)"
    )
    assert got["outcome_after_horizon"] == (
        "ot: 1 event came more than 2 days after the score time (row 1); the label column counts it "
        "as an event all the same"
    )
    assert ds.groups["site"].tolist() == ["A", None, "B", "A"]
    assert set(got) <= set(WARNING_CODES)


def test_warnings_quote_no_cell_values():
    frame = balanced(20, 30)
    frame["pid"] = "Jane Example"
    frame.loc[0, "score"] = 7.5
    ds = load_dataset(frame.to_csv(index=False).encode(), {**M, "cluster": "pid"})
    assert {"large_clusters", "few_events", "scores_outside_unit_interval"} <= set(codes(ds))
    assert not any("Jane" in w.message for w in ds.warnings)


# =========================================================================== fingerprint


def test_fingerprint_changes_with_the_mapping():
    frame = balanced()
    frame["alt"] = frame["score"][::-1].to_numpy()
    frame["site"] = np.where(np.arange(200) % 2, "A", "B")
    data = frame.to_csv(index=False).encode()
    base = load_dataset(data, M).fingerprint
    others = {
        load_dataset(data, {**M, "score": "alt"}).fingerprint,
        load_dataset(data, {**M, "groups": ["site"]}).fingerprint,
        load_dataset(data, {**M, "higher_is_riskier": False}).fingerprint,
        load_dataset(data, {**M, "positive_label": 0}).fingerprint,
        load_dataset(data, {**M, "drop_missing_scores": True}).fingerprint,
    }
    assert base not in others and len(others) == 5
    assert re.fullmatch(r"[0-9a-f]{64}", base)


def test_fingerprint_canonical_values():
    a = Dataset.from_arrays(
        [0, 1, 0], [0.0, 0.5, 0.25], groups={"g": [1, 2, 1]}, cluster=[10, 11, 10]
    )
    b = Dataset.from_arrays(
        [0, 1, 0], [-0.0, 0.5, 0.25], groups={"g": ["1", " 2", 1.0]}, cluster=["10", "11", "10"]
    )
    assert a.fingerprint == b.fingerprint
    assert a.groups["g"].tolist() == ["1", "2", "1"]
    c = Dataset.from_arrays(
        [0, 0, 1], [0.25, 0.0, 0.5], groups={"g": [1, 1, 2]}, cluster=[10, 10, 11]
    )
    assert c.fingerprint != a.fingerprint  # row order is part of the data


def test_parquet_categoricals_and_nullable_ints_match_csv():
    frame = balanced()
    frame["site"] = np.where(np.arange(200) % 3 == 0, "North", "Quay")
    frame["patient"] = np.arange(200) % 50
    typed = frame.assign(
        site=frame["site"].astype("category"),
        label=frame["label"].map({1: "yes", 0: "no"}).astype("category"),
        patient=frame["patient"].astype("Int64"),
    )
    plain = frame.assign(label=frame["label"].map({1: "yes", 0: "no"}))
    mp = {**M, "positive_label": "yes", "groups": ["site"], "cluster": "patient"}
    a = load_dataset(parquet(typed), mp)
    b = load_dataset(plain.to_csv(index=False).encode(), mp)
    assert a.fingerprint == b.fingerprint
    assert a.cluster[:3].tolist() == ["0", "1", "2"]


def test_subset_fingerprint_equals_the_loaded_subset():
    frame = balanced()
    frame["site"] = np.where(np.arange(200) % 3 == 0, "North", "Quay")
    mp = {**M, "groups": ["site"]}
    ds = load_dataset(frame.to_csv(index=False).encode(), mp)
    mask = np.arange(200) % 4 != 1
    sub = load_dataset(frame[mask].to_csv(index=False).encode(), mp)
    assert ds.subset(mask).fingerprint == sub.fingerprint


def _reference_codes(values) -> tuple[list[int], list[str]]:
    """Codes by first appearance of the canonical texts, one value at a time (common practice,
    no source): strip surrounding spaces, the missing words and None are missing (-1)."""
    from core.reading import MISSING_TEXT

    seen: dict[str, int] = {}
    out = []
    for v in values:
        t = None if v is None else str(v).strip()
        if t is None or t in MISSING_TEXT:
            out.append(-1)
            continue
        out.append(seen.setdefault(t, len(seen)))
    return out, list(seen)


@pytest.mark.parametrize("width", [3, 7, 8, 12, 31, 40])  # one word / mixed words / Arrow hashing
@pytest.mark.parametrize("distinct", [5, 3000])  # hash-table route / sort route
def test_text_codes_of_many_ids_equal_a_one_by_one_numbering(width, distinct):
    from core.fingerprint import text_codes

    rng = np.random.default_rng(width * 7 + distinct)
    pool = [f"P{i:0{width - 1}d}"[:width] if k % 3 else f"Q{i}" for k, i in
            enumerate(rng.integers(0, 10 ** min(width - 1, 9), distinct))]
    pool += ["", " P1 ", "P1", "NA", "  ", "é" * (width // 2 + 1)]
    rows = [pool[i] for i in rng.integers(0, len(pool), 12_000)]
    rows[5] = None
    want_codes, want_texts = _reference_codes(rows)
    for values in (pd.Series(rows, dtype="str"), np.array(rows, dtype=object)):
        got_codes, got_texts = text_codes(values)
        assert got_codes.tolist() == want_codes
        assert got_texts.tolist() == want_texts


def test_text_codes_survive_a_hash_collision(monkeypatch):
    # The 64-bit mix of a long id's words is checked row by row against its group's first row;
    # a collision (forced here: every key equal) falls back to Arrow's exact hashing.
    import core.fingerprint as fp

    rows = [f"customer-{i % 700:05d}" for i in range(9000)]
    want_codes, want_texts = _reference_codes(rows)
    real = fp._group_keys
    monkeypatch.setattr(fp, "_group_keys", lambda key: real(np.zeros_like(key)))
    codes, texts = fp.text_codes(pd.Series(rows, dtype="str"))
    assert codes.tolist() == want_codes and texts.tolist() == want_texts
    assert fp._string_groups(pa.array(rows, type=pa.large_string())) is None


def test_sorted_grouping_survives_shared_hash_bits(monkeypatch):
    # Many short ids are grouped by one sort of (hash bits, row); runs are checked to hold one id.
    # With the mix zeroed every row shares its hash bits: the check must catch it and group by
    # the ids themselves.
    import core.fingerprint as fp

    rng = np.random.default_rng(2)
    rows = [f"P{i}" for i in rng.integers(100_000, 104_000, 30_000)]
    want_codes, want_texts = _reference_codes(rows)
    monkeypatch.setattr(fp, "_MIX", (np.uint64(0), np.uint64(0)))
    codes, texts = fp.text_codes(pd.Series(rows, dtype="str"))
    assert codes.tolist() == want_codes and texts.tolist() == want_texts


def test_integer_ids_match_their_text():
    from core.fingerprint import text_codes

    ids = np.random.default_rng(4).integers(-(10**12), 10**12, 20_000) // 1000
    a_codes, a_texts = text_codes(ids)
    b_codes, b_texts = text_codes(pd.Series(ids.astype(str), dtype="str"))
    assert a_codes.tolist() == b_codes.tolist() and a_texts.tolist() == b_texts.tolist()
    assert a_texts[0] == str(ids[0]) and a_codes[0] == 0


def test_many_cluster_ids_one_fingerprint_from_csv_parquet_and_arrays():
    rng = np.random.default_rng(11)
    n = 20_000
    frame = pd.DataFrame({
        "score": rng.random(n).round(6),
        "label": (rng.random(n) < 0.1).astype(int),
        "patient": np.char.add("P", rng.integers(10_000, 16_000, n).astype(str)),
        "site": np.array(["North", "Quay", "Vale"])[rng.integers(0, 3, n)],
    })
    mp = {**M, "groups": ["site"], "cluster": "patient"}
    a = load_dataset(frame.to_csv(index=False).encode(), mp)
    b = load_dataset(parquet(frame), mp)
    c = Dataset.from_arrays(frame["label"], frame["score"], groups={"site": frame["site"]},
                            cluster=frame["patient"].to_numpy(dtype=object))
    assert a.fingerprint == b.fingerprint
    assert a.cluster.tolist() == frame["patient"].tolist() == c.cluster.tolist()
    keep = np.arange(n) % 5 != 0
    assert a.subset(keep).fingerprint == load_dataset(parquet(frame[keep]), mp).fingerprint


def test_cluster_codes_kept_from_the_intake_equal_factorizing_the_ids():
    # reference: pandas.factorize of the Dataset's ids (order of first appearance), as computed
    # for a Dataset built from arrays; the intake hands over its own grouping's codes instead
    rng = np.random.default_rng(12)
    n = 5_000
    frame = pd.DataFrame({"score": rng.random(n).round(4), "label": (rng.random(n) < 0.1).astype(int),
                          "patient": np.char.add("P", rng.integers(100, 1_600, n).astype(str))})
    holed = frame.astype({"score": object})
    holed.loc[rng.choice(n, 40, replace=False), "score"] = ""  # missing scores, dropped on request
    mp = {**M, "cluster": "patient"}
    for ds, dropped in ((load_dataset(frame.to_csv(index=False).encode(), mp), 0),
                        (load_dataset(holed.to_csv(index=False).encode(),
                                      {**mp, "drop_missing_scores": True}), 40)):
        assert ds.dropped_rows == dropped
        kept = ds.__dict__["_cluster_codes"]
        codes, uniques = pd.factorize(ds.cluster)
        assert np.array_equal(kept[0], codes) and kept[1] == len(uniques) == np.unique(ds.cluster).size
        assert ds.cluster_codes() is kept
        fresh = Dataset.from_arrays(ds.y_true, ds.y_score, cluster=ds.cluster)
        assert "_cluster_codes" not in fresh.__dict__
        assert np.array_equal(fresh.cluster_codes()[0], kept[0]) and fresh.cluster_codes()[1] == kept[1]
        half = ds.subset(np.arange(ds.y_true.size) % 2 == 0)
        assert np.array_equal(half.cluster_codes()[0], pd.factorize(half.cluster)[0])


# --------------------------------------------------------------------------- round trip property

_TEXT = st.text(alphabet='bcdgkmpqvwxz ,;"é', min_size=1, max_size=6)
# openpyxl writes numbers with 16 significant digits, so the property uses scores that survive it
_SCORE = (
    st.floats(allow_nan=False, allow_infinity=False, width=64)
    .map(lambda v: float(f"{v:.15g}"))
    .filter(lambda v: math.isfinite(v) and float(f"{v:.16g}") == v)
)


@st.composite
def tables(draw):
    n = draw(st.integers(2, 25))
    labels = [0, 1] + draw(st.lists(st.integers(0, 1), min_size=n - 2, max_size=n - 2))
    as_words = draw(st.booleans())
    frame = pd.DataFrame(
        {
            "score": draw(st.lists(_SCORE, min_size=n, max_size=n)),
            "label": [("yes" if v else "no") for v in labels] if as_words else labels,
            "site": draw(st.lists(_TEXT, min_size=n, max_size=n)),
            "patient": draw(st.lists(st.integers(0, 6), min_size=n, max_size=n)),
            "weight": draw(
                st.lists(st.floats(0.5, 1000.0).map(lambda v: round(v, 6)), min_size=n, max_size=n)
            ),
            "amount": draw(
                st.lists(st.floats(0, 1e6).map(lambda v: round(v, 2)), min_size=n, max_size=n)
            ),
            "when": pd.Timestamp("2020-01-01")
            + pd.to_timedelta(
                draw(st.lists(st.integers(0, 10 * 365 * 86400), min_size=n, max_size=n)), unit="s"
            ),
        }
    )
    return frame, ("yes" if as_words else "1")


def _write(frame: pd.DataFrame, fmt: str) -> tuple[bytes, str]:
    if fmt == "csv":
        return frame.to_csv(index=False).encode(), "t.csv"
    if fmt == "tsv":
        return frame.to_csv(index=False, sep="\t").encode(), "t.tsv"
    if fmt == "parquet":
        return parquet(frame), "t.parquet"
    buf = io.BytesIO()
    frame.to_excel(buf, index=False)
    return buf.getvalue(), "t.xlsx"


@settings(
    derandomize=True, deadline=None, max_examples=30, suppress_health_check=[HealthCheck.too_slow]
)
@given(tables())
def test_round_trip_all_formats_one_fingerprint(table):
    frame, positive = table
    mapping = Mapping(
        score="score",
        label="label",
        positive_label=positive,
        weight="weight",
        weight_kind="sampling",
        groups=("site",),
        cluster="patient",
        score_time="when",
        case_cost="amount",
    )
    loaded = {
        fmt: load_dataset(*_write(frame, fmt)[:1], mapping, file_name=_write(frame, fmt)[1])
        for fmt in ("csv", "tsv", "parquet", "excel")
    }
    ref = loaded["parquet"]
    # against the table itself
    np.testing.assert_array_equal(
        ref.y_score.view(np.int64), (frame["score"].to_numpy() + 0.0).view(np.int64)
    )
    np.testing.assert_array_equal(ref.y_true, frame["label"].isin([1, "yes"]).to_numpy())
    assert ref.groups["site"].tolist() == [v.strip() or None for v in frame["site"]]
    assert ref.cluster.tolist() == [str(v) for v in frame["patient"]]
    np.testing.assert_array_equal(ref.score_time, frame["when"].to_numpy().astype("datetime64[ns]"))
    np.testing.assert_array_equal(ref.sample_weight, frame["weight"].to_numpy())
    np.testing.assert_array_equal(ref.case_cost, frame["amount"].to_numpy())
    for fmt, ds in loaded.items():
        np.testing.assert_array_equal(
            ds.y_score.view(np.int64), ref.y_score.view(np.int64), err_msg=fmt
        )
        np.testing.assert_array_equal(ds.y_true, ref.y_true, err_msg=fmt)
        assert ds.groups["site"].tolist() == ref.groups["site"].tolist(), fmt
        assert ds.cluster.tolist() == ref.cluster.tolist(), fmt
        np.testing.assert_array_equal(ds.score_time, ref.score_time, err_msg=fmt)
        np.testing.assert_array_equal(ds.sample_weight, ref.sample_weight, err_msg=fmt)
        np.testing.assert_array_equal(ds.case_cost, ref.case_cost, err_msg=fmt)
    assert len({ds.fingerprint for ds in loaded.values()}) == 1


# =========================================================================== suggest_mapping


def test_suggest_mapping():
    raw = read_table(
        csv(
            "case_id,patient_id,ward,predicted_risk,outcome,alert_time",
            "1,P1,A,0.12,no,2025-01-01 10:00",
            "2,P2,B,0.85,yes,2025-01-01 11:00",
            "3,P1,A,0.33,no,2025-01-02 09:00",
        )
    )
    m = suggest_mapping(raw)
    assert (m.score, m.label, m.positive_label) == ("predicted_risk", "outcome", "yes")
    assert (m.cluster, m.score_time, m.groups) == ("patient_id", "alert_time", ("ward",))
    assert load_dataset(raw, m).n_rows == 3
    coded = suggest_mapping(read_table(csv("score,code", "0.1,1", "0.2,1", "0.7,2")))
    assert (coded.label, coded.positive_label) == ("code", 2)  # the rarer value
    counts = suggest_mapping(read_table(csv("score,events,non_events", "0.1,1,5", "0.2,3,2")))
    assert (counts.kind, counts.events, counts.non_events) == ("counts", "events", "non_events")


# --------------------------------------------------------------------------- text columns ahead

def _large_frame(n=250_000, seed=3):
    g = np.random.default_rng(seed)
    return pd.DataFrame({
        "score": np.round(g.random(n), 4),
        "label": (g.random(n) < 0.03).astype(int),
        "site": np.array(["North", "Quay", "Vale"])[g.integers(0, 3, n)],
        "patient": np.char.add("P", g.integers(1000, 90_000, n).astype(str)),
    })


def test_text_columns_grouped_ahead_give_the_same_dataset_and_messages(monkeypatch):
    # Source: common practice, no source -- from 200,000 rows the group and cluster columns
    # are encoded on a second thread; the Dataset, its fingerprint and the order of the
    # messages must be those of doing it in turn.
    import core.intake as intake

    m = {"score": "score", "label": "label", "positive_label": 1, "groups": ["site"],
         "cluster": "patient"}
    frame = _large_frame()
    data = frame.to_csv(index=False).encode()
    ahead = load_dataset(data, m, file_name="big.csv")
    monkeypatch.setattr(intake, "_AHEAD_ROWS", 10**12)
    in_turn = load_dataset(data, m, file_name="big.csv")
    assert ahead.fingerprint == in_turn.fingerprint
    np.testing.assert_array_equal(ahead.cluster, in_turn.cluster)
    np.testing.assert_array_equal(ahead.groups["site"], in_turn.groups["site"])
    monkeypatch.setattr(intake, "_AHEAD_ROWS", 200_000)
    bad = frame.copy()
    bad.loc[[4, 7], "patient"] = None
    bad_data = bad.to_csv(index=False).encode()
    with pytest.raises(InputError) as exc:
        load_dataset(bad_data, m, file_name="big.csv")
    assert "patient" in str(exc.value) and "missing" in str(exc.value) and "5, 8" in str(exc.value)
    bad["score"] = bad["score"].astype(object)
    bad.loc[2, "score"] = "n.a."  # a bad score is still reported first
    with pytest.raises(InputError) as exc:
        load_dataset(bad.to_csv(index=False).encode(), m, file_name="big.csv")
    assert str(exc.value).startswith("score")


@pytest.mark.parametrize("dtype", [np.int64, np.int8, np.uint8, bool])
def test_zero_one_labels_take_the_short_path_to_the_same_answer(monkeypatch, dtype):
    # Source: common practice, no source -- a 0/1 or boolean label column is read in two
    # passes; every event value must give what the general path gives, error messages too.
    import core.intake as intake

    v = np.random.default_rng(1).random(5000) < 0.03
    for values in (v, ~v, np.zeros(5000, dtype=bool)):
        ser = pd.Series(values.astype(dtype))
        for positive in (1, 0, True, False, "1", "0", "yes", "no", "true", 1.0, "1.0", 2, "x"):
            def run():
                try:
                    return intake._labels(ser, "label", positive, intake._Rows(len(ser)))
                except InputError as exc:
                    return str(exc)

            short = run()
            with monkeypatch.context() as mp:
                mp.setattr(intake, "_zero_one_labels", lambda *a: None)
                general = run()
            if isinstance(general, str):
                assert short == general
            else:
                np.testing.assert_array_equal(short[0], general[0])
                assert short[1:] == general[1:] and type(short[1]) is type(general[1])
