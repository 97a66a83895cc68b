"""The history under hostile or careless use, through the CLI with real files: integer
format versions, verified and bounded imports, studies whose every trial failed, foreign
files in table folders, concurrent compactions (real processes) and fingerprint values
outside the catalogue's ranges.
"""

from __future__ import annotations

import io
import json
import os
import socket
import subprocess
import sys
import time
import zipfile
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from click.testing import CliRunner
from sklearn.datasets import load_breast_cancer, load_diabetes, load_iris, load_wine

from cli.main import main
from tests.conftest import dir_digest
from tests.test_history_concurrency import ROOT
from warmstart import fingerprint
from warmstart.errors import BadInputError
from warmstart.fingerprint import CATALOGUE, Fingerprint
from warmstart.fingerprint.catalogue import parse_range, range_problem
from warmstart.history import KnowledgeBase
from warmstart.layout import FORMAT_FILE, FORMAT_VERSION, format_version_of
from warmstart.maintenance import (
    COMPACT_LOCK,
    EXPORT_MARKER,
    MAX_IMPORT_BYTES,
    STALE_LOCK_SECONDS,
    read_export,
    summary,
)


def cli(*args):
    return CliRunner().invoke(main, list(map(str, args)))


@pytest.fixture(scope="module")
def fps():
    # reference datasets: scikit-learn's bundled iris, wine and breast cancer
    return {n: fingerprint(loader(as_frame=True).frame, target="target")
            for n, loader in (("iris", load_iris), ("wine", load_wine),
                              ("cancer", load_breast_cancer))}


def good_trials(i: int = 0) -> list[dict]:
    return [{"n_estimators": 10 + 7 * j + i, "max_depth": 2 + j, "score": 0.8 + 0.01 * j}
            for j in range(4)]


FAILED = [{"n_estimators": 50, "score": None, "status": "failed", "error": "MemoryError"},
          {"n_estimators": 80, "score": None, "status": "failed", "error": "MemoryError"}]


@pytest.fixture
def filled(tmp_path, fps) -> KnowledgeBase:
    """A history of three good studies on iris and wine (three files per table)."""
    kb = KnowledgeBase.init(tmp_path / "kb")
    for i, name in enumerate(("iris", "wine", "iris")):
        kb.log(fingerprint_of=fps[name], family="random_forest", name=f"{name}{i}",
               trials=good_trials(i))
    return kb


# -- 7. versions are integers -----------------------------------------------------------
def rezip(src: Path, dest: Path, replace: dict[str, bytes]) -> Path:
    """A copy of the ZIP ``src`` with some members' bytes replaced."""
    with zipfile.ZipFile(src) as zin, zipfile.ZipFile(dest, "w") as zout:
        for info in zin.infolist():
            zout.writestr(info.filename, replace.get(info.filename, zin.read(info.filename)))
    return dest


def export_marker(path: Path) -> dict:
    with zipfile.ZipFile(path) as zf:
        return json.loads(zf.read(EXPORT_MARKER))


@pytest.mark.parametrize("value, good", [
    (FORMAT_VERSION, True), (str(FORMAT_VERSION), False), (FORMAT_VERSION + 0.5, False),
    (float(FORMAT_VERSION), False), (True, False), (-1, False), (None, False),
    ([FORMAT_VERSION], False)])
def test_history_and_export_agree_on_what_a_version_is(tmp_path, filled, value, good):
    # reference: JSON (RFC 8259) tells integers from strings, floats and booleans
    assert (format_version_of(value) is not None) == good
    export = tmp_path / "e.zip"
    assert cli("kb", "export", export, "--kb", filled.path).exit_code == 0
    marker = {**export_marker(export), "format_version": value}
    bad_export = rezip(export, tmp_path / "v.zip",
                       {EXPORT_MARKER: json.dumps(marker).encode()})
    target = KnowledgeBase.init(tmp_path / "other")
    r_import = cli("kb", "import", bad_export, "--kb", target.path)
    hist = json.loads((filled.path / FORMAT_FILE).read_text())
    (filled.path / FORMAT_FILE).write_text(json.dumps({**hist, "format_version": value}))
    r_info = cli("kb", "info", "--kb", filled.path)
    assert (r_import.exit_code == 0) == good == (r_info.exit_code == 0), (
        r_import.output, r_info.output)
    if not good:
        for r in (r_import, r_info):
            line = r.output.strip()
            assert "\n" not in line and line.startswith("error: ")
            assert "is not a format version (a whole number >= 0)" in line, line


# -- 8. exports are verified and bounded ------------------------------------------------
def test_import_help_states_the_cap():
    r = cli("kb", "import", "--help")
    assert MAX_IMPORT_BYTES == 2 * 1024 ** 3 and "at most 2 GiB uncompressed" in r.output


def test_an_edited_export_is_refused_and_nothing_written(tmp_path, filled):
    export = tmp_path / "e.zip"
    cli("kb", "export", export, "--kb", filled.path)
    with zipfile.ZipFile(export) as zf:
        trials = pq.read_table(io.BytesIO(zf.read("trials.parquet"))).to_pandas()
    trials.loc[0, "score"] = 0.99  # a better score than was measured
    buf = io.BytesIO()
    pq.write_table(pa.Table.from_pandas(trials, preserve_index=False), buf)
    edited = rezip(export, tmp_path / "edited.zip", {"trials.parquet": buf.getvalue()})
    target = KnowledgeBase.init(tmp_path / "other")
    before = dir_digest(target.path)
    r = cli("kb", "import", edited, "--kb", target.path)
    assert r.exit_code == 2 and "content hash" in r.output, r.output
    assert dir_digest(target.path) == before
    # the untouched export imports, and its hash is the source history's
    r = cli("kb", "import", export, "--kb", target.path, "--json")
    assert r.exit_code == 0 and json.loads(r.output)["studies_added"] == 3
    assert summary(target)["content_hash"] == summary(filled)["content_hash"]


def declared_size(path: Path, member: str, size: int) -> Path:
    """Rewrite the uncompressed size the central directory states for ``member``
    (reference: PKWARE APPNOTE 4.3.12, the field at offset 24 of a directory entry)."""
    data = bytearray(path.read_bytes())
    at = data.find(b"PK\x01\x02")
    while at >= 0:
        n = int.from_bytes(data[at + 28:at + 30], "little")
        if data[at + 46:at + 46 + n] == member.encode():
            data[at + 24:at + 28] = size.to_bytes(4, "little")
            break
        at = data.find(b"PK\x01\x02", at + 4)
    path.write_bytes(bytes(data))
    return path


def bomb(tmp_path: Path, export: Path, megabytes: int) -> Path:
    """``export`` with trials.parquet replaced by ``megabytes`` MiB of zeros, deflated
    (a few hundred times smaller on disk)."""
    dest = tmp_path / f"bomb{megabytes}.zip"
    with zipfile.ZipFile(export) as zin, zipfile.ZipFile(
            dest, "w", compression=zipfile.ZIP_DEFLATED) as zout:
        for info in zin.infolist():
            if info.filename == "trials.parquet":
                with zout.open("trials.parquet", "w") as fh:
                    for _ in range(megabytes):
                        fh.write(bytes(1 << 20))
            else:
                zout.writestr(info.filename, zin.read(info.filename))
    return dest


def test_crafted_zips_are_refused_without_reading_them_whole(tmp_path, filled):
    export = tmp_path / "e.zip"
    cli("kb", "export", export, "--kb", filled.path)
    target = KnowledgeBase.init(tmp_path / "other")
    before = dir_digest(target.path)
    small = bomb(tmp_path, export, 64)
    assert small.stat().st_size < 1 << 20  # reference: deflate of zeros, about 1000:1
    # a member declaring 3 GiB: refused from the directory, before any byte is inflated
    big = declared_size(bomb(tmp_path, export, 1), "trials.parquet", 3 * 1024 ** 3)
    r = cli("kb", "import", big, "--kb", target.path)
    assert r.exit_code == 2 and "kb import reads at most 2,147,483,648" in r.output, r.output
    # a member lying about its size (declares 100 bytes, inflates to 64 MiB): zipfile
    # stops at the declared size and the CRC then fails
    liar = declared_size(small, "trials.parquet", 100)
    r = cli("kb", "import", liar, "--kb", target.path)
    assert r.exit_code == 2 and "Bad CRC-32" in r.output, r.output
    # the honest 64 MiB bomb, with a smaller cap given to the library
    with pytest.raises(BadInputError, match="declares 67,1"):
        read_export(bomb(tmp_path, export, 64), max_bytes=32 << 20)
    assert dir_digest(target.path) == before


# -- 9. studies whose every trial failed --------------------------------------------------
def test_all_failed_study_is_logged_noted_and_skipped_by_readers(tmp_path, filled, fps):
    query = tmp_path / "q.json"
    query.write_text(fps["cancer"].to_json())
    asked = {
        "suggest": ["suggest", "--fingerprint", query, "-f", "random_forest", "-k", "3",
                    "--json"],
        "similar": ["similar", "--fingerprint", query, "-k", "5", "--json"],
        "backtest": ["backtest", "-f", "random_forest", "--ks", "1,3", "--strategies",
                     "portfolio,nearest-best,defaults", "--json"],
    }
    before = {what: cli(*args, "--kb", filled.path) for what, args in asked.items()}
    assert all(r.exit_code == 0 for r in before.values()), before
    trials = tmp_path / "failed.csv"
    pd.DataFrame(FAILED).to_csv(trials, index=False)
    fp_file = tmp_path / "cancer-fp.json"
    fp_file.write_text(fps["cancer"].to_json())
    r = cli("log", "--fingerprint", fp_file, "-f", "random_forest", "--trials", trials,
            "--kb", filled.path)
    assert r.exit_code == 0 and "0 ok" in r.output, r.output
    for what, args in asked.items():  # the same answers as without the failed study
        after = cli(*args, "--kb", filled.path)
        assert after.exit_code == 0 and after.output == before[what].output, what
    r = cli("kb", "check", "--kb", filled.path, "--json")
    assert r.exit_code == 0, r.output
    notes = [f for f in json.loads(r.output)["findings"] if f["status"] == "note"]
    assert any("1 studies whose every trial failed" in f["detail"] for f in notes), notes
    info = json.loads(cli("kb", "info", "--kb", filled.path, "--json").output)
    assert info["studies"] == 4 and info["studies_all_failed"] == 1
    # the maintenance tools keep it: an export carries all four studies
    r = cli("kb", "export", tmp_path / "e.zip", "--kb", filled.path, "--json")
    assert json.loads(r.output)["studies"] == 4


def test_a_family_with_only_failed_studies_has_nothing_to_suggest(tmp_path, fps):
    kb = KnowledgeBase.init(tmp_path / "kb")
    kb.log(fingerprint_of=fps["iris"], family="random_forest", trials=FAILED)
    fp_file = tmp_path / "q.json"
    fp_file.write_text(fps["wine"].to_json())
    r = cli("suggest", "--fingerprint", fp_file, "-f", "random_forest", "--kb", kb.path)
    assert r.exit_code == 1 and "nothing to compare with" in r.output, r.output


# -- 10. foreign files in table folders ---------------------------------------------------
def iris_parquet() -> bytes:
    """A data set copied into the history by mistake (reference dataset: iris)."""
    buf = io.BytesIO()
    load_iris(as_frame=True).frame.to_parquet(buf)
    return buf.getvalue()


def text_scores_parquet() -> bytes:
    """A trials-like file of the right column names and types, but scores as text."""
    buf = io.BytesIO()
    pq.write_table(pa.table({"study_id": ["x"], "trial_index": pa.array([0], pa.int32()),
                             "config": ["{}"], "score": ["high"], "fit_seconds": [1.0],
                             "status": ["ok"], "error": pa.array([None], pa.string())}), buf)
    return buf.getvalue()


FOREIGN = {"datasets/iris copy.parquet": iris_parquet,
           "trials/hand-made.parquet": text_scores_parquet,
           "studies/notes.parquet": lambda: b"remember to ask about the churn study\n"}


@pytest.mark.parametrize("where", ["datasets/iris copy.parquet", "trials/hand-made.parquet",
                                   "studies/notes.parquet"])
def test_foreign_file_is_reported_in_one_line_and_moved_aside(tmp_path, filled, where):
    content = FOREIGN[where]()
    (filled.path / where).write_bytes(content)
    (filled.path / "studies" / "README.txt").write_text("not Parquet: ignored\n")
    before = dir_digest(filled.path)
    for command in ("info", "compact"):
        r = cli("kb", command, "--kb", filled.path)
        lines = r.output.strip().splitlines()
        assert r.exit_code == 2 and len(lines) == 1, r.output
        assert Path(where).name in lines[0] and "kb check --repair" in lines[0], lines[0]
    assert dir_digest(filled.path) == before
    r = cli("kb", "check", "--kb", filled.path, "--repair")
    assert r.exit_code == 0 and "moved to quarantine/" in r.output, r.output
    aside = filled.path / "quarantine" / where
    assert aside.read_bytes() == content  # never deleted
    assert (filled.path / "studies" / "README.txt").is_file()
    assert cli("kb", "info", "--kb", filled.path).exit_code == 0
    assert cli("kb", "compact", "--kb", filled.path).exit_code == 0
    # the same name again: set aside beside the first, not over it
    (filled.path / where).write_bytes(content)
    cli("kb", "check", "--kb", filled.path, "--repair")
    assert len(list(aside.parent.iterdir())) == 2 and aside.read_bytes() == content


def test_readers_name_a_foreign_studies_file_or_read_past_it(tmp_path, filled, fps):
    query = tmp_path / "q.json"
    query.write_text(fps["cancer"].to_json())
    asked = {"similar": ["similar", "--fingerprint", query],
             "backtest": ["backtest", "-f", "random_forest", "--strategies", "defaults"],
             "suggest": ["suggest", "--fingerprint", query, "-f", "random_forest"]}
    alone = cli(*asked["suggest"], "--kb", filled.path).output
    (filled.path / "studies" / "iris.parquet").write_bytes(iris_parquet())
    for what in ("similar", "backtest"):
        r = cli(*asked[what], "--kb", filled.path)
        lines = r.output.strip().splitlines()
        assert r.exit_code == 2 and len(lines) == 1, r.output
        assert "studies/iris.parquet is not one of its files" in lines[0], lines[0]
        assert "kb check --repair" in lines[0]
    # suggest reads only its family's study rows: the file's rows (no family) are not
    # among them, and the answer is the same
    assert cli(*asked["suggest"], "--kb", filled.path).output == alone


# -- 11. concurrent compactions (real processes) ------------------------------------------
def compact_process(kb: KnowledgeBase, pause: float | None = None) -> subprocess.Popen:
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    if pause:  # each merged file's write waits this long, with the lock held
        env.update(WARMSTART_TEST_PAUSE_AT="mid-file", WARMSTART_TEST_PAUSE_SECONDS=str(pause))
    return subprocess.Popen([sys.executable, "-m", "cli.main", "kb", "compact", "--kb",
                             str(kb.path)], env=env, cwd=ROOT, stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True)


def finish(proc: subprocess.Popen) -> tuple[int, str, str]:
    out, err = proc.communicate(timeout=120)
    return proc.returncode, out, err


def test_later_compactions_exit_0_while_one_runs(filled):
    before = summary(filled)
    first = compact_process(filled, pause=1.5)
    deadline = time.monotonic() + 60
    while not (filled.path / COMPACT_LOCK).exists():
        assert first.poll() is None and time.monotonic() < deadline, finish(first)
        time.sleep(0.05)
    later = [finish(compact_process(filled)) for _ in range(2)]
    code, out, err = finish(first)
    assert code == 0 and "content unchanged" in out, (out, err)
    for code, out, err in later:
        assert code == 0 and "another compaction is running" in out, (out, err)
        assert "Traceback" not in err
    assert not (filled.path / COMPACT_LOCK).exists()
    assert summary(filled)["content_hash"] == before["content_hash"]
    assert summary(filled)["files"] == 3


def test_compactions_started_together_all_exit_0(filled):
    before = summary(filled)
    results = [finish(p) for p in [compact_process(filled) for _ in range(4)]]
    for code, out, err in results:
        assert code == 0 and "Traceback" not in err, (out, err)
        assert "content unchanged" in out or "another compaction is running" in out, out
    assert summary(filled)["content_hash"] == before["content_hash"]
    assert cli("kb", "check", "--kb", filled.path).exit_code == 0


def write_lock(kb: KnowledgeBase, pid: int, host: str | None = None, age: float = 0.0):
    lock = kb.path / COMPACT_LOCK
    lock.write_text(json.dumps({"pid": pid, "host": host or socket.gethostname(),
                                "started_at": "2026-01-01T00:00:00+00:00", "token": "t"}))
    if age:
        os.utime(lock, (time.time() - age, time.time() - age))
    return lock


def dead_pid() -> int:
    proc = subprocess.Popen([sys.executable, "-c", "pass"])
    proc.wait()  # reaped: its pid names no process (reuse within the test is unlikely)
    return proc.pid


@pytest.mark.parametrize("holder, taken_over", [
    ("a live process on this host", False),
    ("a process on another host", False),
    ("a process that is gone", True),
    ("a live process, older than the stale age", True),
    ("another host, older than the stale age", True),
])
def test_stale_lock_rule(filled, holder, taken_over):
    live = os.getpid()
    lock = {"a live process on this host": lambda: write_lock(filled, live),
            "a process on another host": lambda: write_lock(filled, 1, "elsewhere.invalid"),
            "a process that is gone": lambda: write_lock(filled, dead_pid()),
            "a live process, older than the stale age":
                lambda: write_lock(filled, live, age=STALE_LOCK_SECONDS + 60),
            "another host, older than the stale age":
                lambda: write_lock(filled, 1, "elsewhere.invalid",
                                   age=STALE_LOCK_SECONDS + 60)}[holder]()
    r = cli("kb", "compact", "--kb", filled.path)
    assert r.exit_code == 0, r.output
    if taken_over:
        assert "content unchanged" in r.output and not lock.exists()
    else:
        assert "another compaction is running" in r.output and lock.exists()
        assert summary(filled)["files"] == 9  # nothing merged


# -- 12. fingerprint values inside the catalogue's ranges ---------------------------------
def test_range_texts_parse_to_the_intervals_they_state():
    # reference: interval notation (ISO 80000-2, 2-7)
    assert parse_range("[0, 1]") == (((None, 0.0), (None, 1.0)),)
    assert parse_range("[1, rows]") == (((None, 1.0), ("rows", 0.0)),)
    assert parse_range("[0, classes - 1)") == (((None, 0.0), ("classes", -1.0)),)
    assert parse_range("[0, 1] or (-inf, 1]")[1] == ((None, -np.inf), (None, 1.0))
    for bad in ("0 to 1", "[0, 1", "[a b, 1]", "[0, nan]"):
        with pytest.raises(ValueError):
            parse_range(bad)
    names = {b[0] for mf in CATALOGUE.values() for iv in mf.bounds for b in iv if b[0]}
    assert names and names <= set(CATALOGUE)  # a range names only real meta-features


def dirty_frame() -> pd.DataFrame:
    rng = np.random.default_rng(7)
    n = 300
    df = pd.DataFrame({"x": rng.normal(size=n), "k": rng.choice(list("abcde"), n),
                       "m": np.where(rng.random(n) < 0.3, np.nan, rng.normal(size=n)),
                       "y": rng.integers(0, 4, n)})
    df.loc[::17, "k"] = None
    return df


def test_real_fingerprints_lie_inside_their_ranges():
    # reference datasets: scikit-learn's bundled iris, wine, breast cancer and diabetes,
    # plus a seeded frame with missing values and a categorical column
    frames = [loader(as_frame=True).frame for loader in
              (load_iris, load_wine, load_breast_cancer, load_diabetes)] + [dirty_frame()]
    for frame in frames:
        target = "y" if "y" in frame else "target"
        fp = fingerprint(frame, target=target)
        problems = {k: range_problem(k, v, fp.values) for k, v in fp.values.items()}
        assert not any(problems.values()), {k: w for k, w in problems.items() if w}
        again = Fingerprint.from_dict(json.loads(fp.to_json()))  # loads again
        assert again.dataset_hash == fp.dataset_hash
    # the shipped demo history's stored fingerprints too
    demo = KnowledgeBase(ROOT / "knowledge_base").fingerprints()
    assert demo and not any(range_problem(k, v, fp.values) for fp in demo.values()
                            for k, v in fp.values.items() if k in CATALOGUE)


@pytest.mark.parametrize("change, message", [
    ({"rows": -5}, "'rows' is -5, outside its range [1, inf)"),
    ({"majority_class_share": 1.7}, "'majority_class_share' is 1.7, outside its range"),
    ({"classes": 2.5}, "'classes' is 2.5, not a whole number"),
    ({"missing_pattern_count": 1e6}, "'missing_pattern_count' is 1000000, outside its "
                                     "range [1, rows]"),
    ({"landmark_linear": 1.2}, "'landmark_linear' is 1.2, outside its range"),
])
def test_fingerprint_outside_the_ranges_is_refused_naming_the_meta_feature(
        tmp_path, fps, change, message):
    kb = KnowledgeBase.init(tmp_path / "kb")
    d = fps["iris"].to_dict()
    d["meta_features"] = {**d["meta_features"], **change}
    path = tmp_path / "fp.json"
    path.write_text(json.dumps(d))
    r = cli("similar", "--fingerprint", path, "--kb", kb.path)
    lines = r.output.strip().splitlines()
    assert r.exit_code == 2 and len(lines) == 1 and message in lines[0], r.output
