"""Bad input fuzzing: thousands of generated files through the core, the CLI and the app.

Every file (see :mod:`tests.fuzz_files` for the kinds and the oracle) either
loads, with exactly the numbers written in it, or is refused with
:class:`core.errors.InputError` naming the column and the rows; no other
exception. The command line refuses with exit code 2 and the same one line
the core gives; the app shows the message and no exception. Common practice,
no source: a tool that holds personal data must never crash on a file.

Each test prints its figure ("files tried, held, loaded, refused") past
pytest's capture and stores it in ``artifacts/reliability.json``.
"""

from __future__ import annotations

import contextlib
import io
import os
import subprocess
import sys
from collections import Counter
from pathlib import Path

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from core.cli import main as cli_main
from core.dataset import Mapping
from core.errors import InputError
from core.intake import load_dataset
from tests.fuzz_files import KINDS, check_outcome, make_file
from tests.reliability import report

ROOT = Path(__file__).resolve().parents[1]
APP = str(ROOT / "app" / "main.py")

#: Files per CI run through both the core and the CLI's main(argv).
N_FILES = 5_000
N_SUBPROCESS = 20
N_APP = 100

_FUZZ = settings(derandomize=True, deadline=None, database=None, max_examples=N_FILES,
                 suppress_health_check=list(HealthCheck), print_blob=True)

_KIND = st.sampled_from(KINDS)
_SEED = st.integers(min_value=0, max_value=2**32 - 1)


def _mapping(f) -> Mapping:
    return Mapping(score=f.score, label=f.label, positive_label="1")


def _core(f):
    """(dataset, None) or (None, error) from the core's load_dataset on the file's bytes."""
    try:
        return load_dataset(f.data, _mapping(f), file_name=f.name), None
    except Exception as exc:  # noqa: BLE001 -- judged by check_outcome: only InputError passes
        return None, exc


def _pick_argv(path) -> list[str]:
    return ["pick", str(path), "--score", "score", "--label", "label", "--positive", "1",
            "--replicates", "50"]


def _cli(f, folder: Path) -> tuple[int, str]:
    """(exit code, stderr) of ``fulcrum pick FILE`` run in-process on the file."""
    path = folder / f.name
    path.write_bytes(f.data)
    err, out = io.StringIO(), io.StringIO()
    with contextlib.redirect_stderr(err), contextlib.redirect_stdout(out):
        code = cli_main(_pick_argv(path))
    return code, err.getvalue()


def _check_cli(f, code: int, stderr: str, core_error) -> str:
    where = f"{f.kind} seed {f.seed} ({f.name})"
    assert code in (0, 2), f"{where}: exit {code}: {stderr}"
    if code == 2:
        lines = stderr.splitlines()
        assert len(lines) == 1 and lines[0].startswith("fulcrum: "), f"{where}: {stderr!r}"
        assert "Traceback" not in stderr
        if core_error is not None:  # the same sentence as the core's, word for word
            assert lines[0] == f"fulcrum: {core_error}", where
        return "exit 2"
    assert core_error is None, f"{where}: the CLI accepted what the core refused: {core_error}"
    assert stderr == "", f"{where}: {stderr!r}"
    return "exit 0"


def test_fuzz_intake_core_and_cli(tmp_path_factory, capsys):
    folder = tmp_path_factory.mktemp("fuzz_cli")
    core_tally: Counter = Counter()
    cli_tally: Counter = Counter()
    kinds: Counter = Counter()

    @_FUZZ
    @given(kind=_KIND, seed=_SEED)
    def case(kind, seed):
        f = make_file(kind, seed)
        dataset, error = _core(f)
        core_tally[check_outcome(f, dataset, error)] += 1
        code, stderr = _cli(f, folder)
        cli_tally[_check_cli(f, code, stderr, error)] += 1
        kinds[kind] += 1

    case()
    tried = sum(core_tally.values())
    assert tried >= N_FILES and sum(cli_tally.values()) == tried
    assert core_tally["loaded"] > 0.2 * tried and core_tally["refused"] > 0.2 * tried
    assert len(kinds) == len(set(KINDS))
    report(capsys, "fuzz_intake_core",
           f"fuzz intake (core load_dataset): {tried:,} files tried, {tried:,} held "
           f"({core_tally['loaded']:,} loaded with the numbers written, {core_tally['refused']:,} "
           f"refused with an InputError naming the column or file and the rows)",
           tried=tried, held=tried, loaded=core_tally["loaded"], refused=core_tally["refused"],
           kinds=dict(kinds))
    report(capsys, "fuzz_intake_cli",
           f"fuzz intake (fulcrum pick, in-process main(argv)): {tried:,} files tried, {tried:,} "
           f"held ({cli_tally['exit 0']:,} exit 0, {cli_tally['exit 2']:,} exit 2 with one line, "
           f"the core's sentence word for word)",
           tried=tried, held=tried, exit_0=cli_tally["exit 0"], exit_2=cli_tally["exit 2"])


def _fixed_files(n: int, offset: int) -> list:
    """n files, every kind in turn, seeds from ``offset`` (the same files every run)."""
    kinds = sorted(set(KINDS))
    return [make_file(kinds[i % len(kinds)], offset + i) for i in range(n)]


def test_fuzz_intake_real_subprocesses(tmp_path, capsys):
    files = _fixed_files(N_SUBPROCESS, 10_000)
    env = dict(os.environ, PYTHONPATH=str(ROOT) + os.pathsep + os.environ.get("PYTHONPATH", ""))
    tally: Counter = Counter()
    for f in files:
        _, error = _core(f)
        path = tmp_path / f"{f.seed}-{f.name}"
        path.write_bytes(f.data)
        proc = subprocess.run([sys.executable, "-m", "core", *_pick_argv(path)], capture_output=True,
                              text=True, env=env, cwd=tmp_path, timeout=300, check=False)
        assert proc.returncode in (0, 2), (f.kind, f.seed, proc.stderr)
        if proc.returncode == 2:
            lines = proc.stderr.splitlines()
            assert len(lines) == 1 and lines[0].startswith("fulcrum: "), (f.kind, proc.stderr)
            if error is not None:
                assert lines[0] == f"fulcrum: {error}".replace(f.name, path.name), f.kind
        else:
            assert error is None and "Threshold" in proc.stdout, (f.kind, f.seed)
        tally[proc.returncode] += 1
    assert tally[2] > 0
    report(capsys, "fuzz_intake_subprocess",
           f"fuzz intake (python -m core pick, real processes): {len(files)} files tried, "
           f"{len(files)} held ({tally[0]} exit 0, {tally[2]} exit 2 with one line, no traceback)",
           tried=len(files), held=len(files), exit_0=tally[0], exit_2=tally[2])


def test_fuzz_intake_app_uploads(capsys):
    """About 100 uploads through the Scores page (AppTest drives st.file_uploader)."""
    from streamlit.testing.v1 import AppTest

    files = _fixed_files(N_APP, 20_000)
    at = AppTest.from_file(APP, default_timeout=120)
    at.run()
    assert not at.exception
    at.radio(key="scores_source").set_value("upload").run()
    tally: Counter = Counter()
    allowed = (".csv", ".tsv", ".txt", ".gz", ".parquet", ".pq", ".xlsx", ".xlsm")
    for f in files:
        if not f.name.endswith(allowed):  # the uploader only offers these extensions
            f.name = Path(f.name).stem + ".csv"
        _, error = _core(f)
        at.file_uploader(key="scores_upload").set_value((f.name, f.data, "application/octet-stream"))
        at.run()
        assert not at.exception, (f.kind, f.seed, at.exception)
        shown = [e.value for e in at.error]
        mapped = {w.key for w in at.selectbox}
        if "map_score" in mapped and "map_label" in mapped and not shown:
            cols = at.selectbox(key="map_score").options
            if "score" in cols and "label" in cols:
                at.selectbox(key="map_score").set_value("score")
                at.selectbox(key="map_label").set_value("label").run()
                assert not at.exception, (f.kind, f.seed, at.exception)
                if "map_positive" in {w.key for w in at.selectbox}:
                    opts = at.selectbox(key="map_positive").options
                    one = [o for o in opts if o.split(" (")[0] in ("1", "1.0", "True")]
                    if one:
                        at.selectbox(key="map_positive").set_value(one[0].split(" (")[0])
                at.button(key="map_apply").click().run()
                assert not at.exception, (f.kind, f.seed, at.exception)
                shown = [e.value for e in at.error]
        if shown:
            assert all("Traceback" not in s and s.strip() for s in shown), (f.kind, f.seed, shown)
            if error is not None and isinstance(error, InputError):
                # the page shows the intake's own sentence (read step or mapping step)
                assert any(s == str(error) for s in shown) or f.kind in ("random_bytes", "damaged",
                                                                         "encodings"), \
                    (f.kind, f.seed, shown, str(error))
            tally["message"] += 1
        else:
            tally["loaded" if any(s.value.startswith("Loaded") for s in at.success) else "read"] += 1
    report(capsys, "fuzz_intake_app",
           f"fuzz intake (Scores page uploads, AppTest): {len(files)} files tried, {len(files)} held "
           f"({tally['loaded']} loaded, {tally['message']} refused with the intake's message, "
           f"{tally['read']} read and waiting for a mapping; no exception, no traceback)",
           tried=len(files), held=len(files), **dict(tally))


# =========================================================================== policy, memo fields, records

N_POLICY = 1_000
N_MEMO = 1_000
N_RECORD = 600

_DOCS = settings(derandomize=True, deadline=None, database=None,
                 suppress_health_check=list(HealthCheck), print_blob=True)


@pytest.fixture(scope="module")
def small_dataset():
    import numpy as np

    from core.dataset import Dataset

    rng = np.random.default_rng(12)
    n = 600
    y = rng.random(n) < 0.08
    s = np.round(rng.normal(y * 1.2, 1.0), 3)
    site = np.where(rng.random(n) < 0.5, "north", "south")
    return Dataset.from_arrays(y, s, groups={"site": site})


def _refusal_ok(error, where) -> None:
    assert isinstance(error, InputError), f"{where}: {type(error).__name__}: {error}"
    msg = str(error)
    assert msg.strip() and "\n" not in msg.strip(), f"{where}: {msg!r}"


def test_fuzz_policy_files(small_dataset, tmp_path, capsys):
    from core.choose import choose
    from core.policy import dumps_policy, loads_policy, resolve_policy

    tally: Counter = Counter()

    @settings(_DOCS, max_examples=N_POLICY)
    @given(seed=_SEED)
    def case(seed):
        from tests.fuzz_files import policy_file

        data, how = policy_file(seed)
        where = f"policy seed {seed} ({how})"
        try:
            policy = loads_policy(data.decode("utf-8"), source="p.toml") if _utf8(data) else None
        except Exception as exc:  # noqa: BLE001 -- judged: only InputError passes
            _refusal_ok(exc, where)
            assert how != "valid", f"{where}: a valid policy was refused: {exc}"
            tally["refused"] += 1
            return
        if policy is None:  # not UTF-8: the file loader's own message
            from core.policy import load_policy

            path = tmp_path / "policy.toml"
            path.write_bytes(data)
            with pytest.raises(InputError):
                load_policy(path)
            tally["refused"] += 1
            return
        assert loads_policy(dumps_policy(policy)) == policy, where
        try:  # a policy that loads is usable: resolved and chosen on data, or refused by name
            resolve_policy(policy, small_dataset)
            choose(small_dataset, policy)
            tally["loaded"] += 1
        except Exception as exc:  # noqa: BLE001 -- judged: only InputError passes
            _refusal_ok(exc, where + " (used on data)")
            tally["loaded, refused on these data"] += 1

    case()
    tried = sum(tally.values())
    assert tried >= N_POLICY and tally["loaded"] > 0 and tally["refused"] > 0
    report(capsys, "fuzz_policy",
           f"fuzz policy files (TOML): {tried:,} files tried, {tried:,} held ({tally['loaded']:,} "
           f"loaded and used to choose a point, {tally['loaded, refused on these data']:,} loaded "
           f"and refused on the data by name, {tally['refused']:,} refused listing the problems)",
           tried=tried, held=tried, **dict(tally))


def test_policy_and_memo_field_files_with_a_byte_order_mark_load(tmp_path):
    from core.memo_fields import load_memo_fields
    from core.policy import load_policy

    path = tmp_path / "p.toml"
    path.write_bytes(b"\xef\xbb\xbf[objective]\nkind = \"max_youden\"\n")
    assert load_policy(path).objective.kind == "max_youden"
    path.write_bytes(b"\xef\xbb\xbftitle = \"Q1\"\n")
    assert load_memo_fields(path)["title"] == "Q1"


def _utf8(data: bytes) -> bool:
    try:
        data.decode("utf-8")
        return True
    except UnicodeDecodeError:
        return False


def test_fuzz_memo_field_files(tmp_path, capsys):
    from core.memo_fields import dumps_memo_fields, load_memo_fields

    tally: Counter = Counter()

    @settings(_DOCS, max_examples=N_MEMO)
    @given(seed=_SEED)
    def case(seed):
        from tests.fuzz_files import memo_fields_file

        data, how = memo_fields_file(seed)
        where = f"memo fields seed {seed} ({how})"
        path = tmp_path / "memo.toml"
        path.write_bytes(data)
        try:
            fields = load_memo_fields(path)
        except Exception as exc:  # noqa: BLE001 -- judged: only InputError passes
            _refusal_ok(exc, where)
            assert how != "valid", f"{where}: valid memo fields were refused: {exc}"
            tally["refused"] += 1
            return
        path.write_text(dumps_memo_fields(fields), encoding="utf-8")
        assert load_memo_fields(path) == fields, where
        tally["loaded"] += 1

    case()
    tried = sum(tally.values())
    assert tried >= N_MEMO and tally["loaded"] > 0 and tally["refused"] > 0
    report(capsys, "fuzz_memo_fields",
           f"fuzz memo-field files (TOML): {tried:,} files tried, {tried:,} held "
           f"({tally['loaded']:,} loaded and round-tripped, {tally['refused']:,} refused listing "
           f"the problems)", tried=tried, held=tried, **dict(tally))


@pytest.fixture(scope="module")
def real_record(small_dataset):
    from core.decision import analyse
    from core.policy import Policy
    from core.record import build_record

    policy = Policy.from_dict({"objective": {"kind": "max_fbeta", "beta": 2.0},
                               "rules": {"min_recall": 0.5}})
    analysis = analyse(small_dataset, policy, n_replicates=50, seed=1)
    return build_record(analysis, memo_fields={"title": "Fuzz base", "author": "Test"})


def test_fuzz_decision_records(real_record, small_dataset, capsys):
    from core.recheck import recheck
    from core.record import RecordError, loads_record, restore_decision

    tally: Counter = Counter()
    rechecks = {"n": 0}

    @settings(_DOCS, max_examples=N_RECORD)
    @given(seed=_SEED)
    def case(seed):
        from tests.fuzz_files import record_file

        data, how, sections = record_file(seed, real_record)
        where = f"record seed {seed} ({how}, changed {sorted(sections)})"
        try:
            rec = loads_record(data, source="r.json")
        except Exception as exc:  # noqa: BLE001 -- judged: only InputError passes
            _refusal_ok(exc, where)
            assert how != "valid", f"{where}: {exc}"
            if how == "edited" and sections:  # the message names a section that was changed
                assert isinstance(exc, RecordError) and exc.field, where
                assert exc.field.split(".")[0] in sections, f"{where}: {exc}"
            tally["refused"] += 1
            return
        assert how not in ("edited", "damaged") or not sections, f"{where}: an edit got through"
        try:  # a record that loads can be restored and rechecked on new data
            restore_decision(rec)
            if how == "resealed" or rechecks["n"] < 5:
                rechecks["n"] += 1
                recheck(rec, small_dataset, n_replicates=50)
            tally["loaded"] += 1
        except Exception as exc:  # noqa: BLE001 -- judged: only InputError passes
            _refusal_ok(exc, where + " (restored and rechecked)")
            tally["loaded, refused on use"] += 1

    case()
    tried = sum(tally.values())
    assert tried >= N_RECORD and tally["loaded"] > 0 and tally["refused"] > 0
    report(capsys, "fuzz_records",
           f"fuzz decision records (JSON): {tried:,} files tried, {tried:,} held "
           f"({tally['loaded']:,} loaded and restored, {rechecks['n']:,} of them rechecked on new "
           f"data, every resealed one included; {tally['loaded, refused on use']:,} loaded and "
           f"refused by name when used; {tally['refused']:,} refused naming the field or the "
           f"changed section)", tried=tried, held=tried, rechecked=rechecks["n"], **dict(tally))


N_RECHECK_UPLOADS = 30


def test_fuzz_record_uploads_on_the_recheck_page(real_record, small_dataset, capsys):
    """Fuzzed decision records uploaded on the Recheck page: the message, never an exception.

    The new data are an upload of the record's own columns, so a record that
    loads is rechecked on the page.
    """
    import pandas as pd
    from streamlit.testing.v1 import AppTest

    from tests.fuzz_files import record_file

    m = real_record["data"]["mapping"]
    new = pd.DataFrame({m["score"]: small_dataset.y_score, m["label"]: small_dataset.y_true.astype(int),
                        "site": small_dataset.groups["site"]}).to_csv(index=False).encode()
    at = AppTest.from_file(APP, default_timeout=180)
    at.run()
    at.switch_page("views/recheck.py").run()
    assert not at.exception
    tally: Counter = Counter()
    for seed in range(N_RECHECK_UPLOADS):
        data, how, _ = record_file(30_000 + seed, real_record)
        at.file_uploader(key="recheck_record_file").set_value(("record.json", data, "application/json"))
        at.run()
        if "recheck_data_source" in {w.key for w in at.radio}:
            at.radio(key="recheck_data_source").set_value("Upload a file").run()
            at.file_uploader(key="recheck_data_file").set_value(("new.csv", new, "text/csv")).run()
        assert not at.exception, (seed, how, at.exception)
        shown = [e.value for e in at.error]
        assert all(s.strip() and "Traceback" not in s for s in shown), (seed, shown)
        done = False
        if not shown and "fulcrum_recheck_record" in at.session_state:
            import json

            sha = json.loads(data)["integrity"]["sha256"]
            done = at.session_state["fulcrum_recheck_record"]["decision_record"]["sha256"] == sha
        tally["message" if shown else ("rechecked" if done else "accepted")] += 1
    assert tally["message"] > 0
    report(capsys, "fuzz_recheck_uploads",
           f"fuzz decision-record uploads (Recheck page, AppTest): {N_RECHECK_UPLOADS} tried, "
           f"{N_RECHECK_UPLOADS} held ({tally['rechecked']} rechecked on the page, {tally['message']} "
           f"refused or stopped with a one-line message, {tally['accepted']} other; no exception)", tried=N_RECHECK_UPLOADS,
           held=N_RECHECK_UPLOADS, **dict(tally))
