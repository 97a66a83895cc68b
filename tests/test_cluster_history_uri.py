"""``--kb`` as a URI of pyarrow's file systems: ``file://`` resolves to the local path and
takes the local code path; file systems without atomic rename are refused in one line,
exit 2, before any network access."""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

import pytest
from click.testing import CliRunner
from pyarrow import fs as pafs

from cli.main import main
from warmstart.errors import BadInputError
from warmstart.filesystems import FILE_SYSTEMS, filesystem_guarantees, history_location
from warmstart.history import KnowledgeBase, resolve_path

REPO = Path(__file__).resolve().parents[1]


def run(*args, env=None):
    return CliRunner().invoke(main, [str(a) for a in args], env=env)


@pytest.mark.parametrize("tail", ["kb", "with space/kb", "caf\u00e9/kb"])
def test_file_uri_resolves_to_the_path_pyarrow_gives(tmp_path, tail):
    # reference: pyarrow.fs.FileSystem.from_uri (LocalFileSystem and the local path)
    local = tmp_path / tail
    uri = local.as_uri()  # percent-escaped, RFC 8089
    filesystem, path = pafs.FileSystem.from_uri(uri)
    assert isinstance(filesystem, pafs.LocalFileSystem)
    assert history_location(uri) == Path(path) == local
    assert resolve_path(uri) == local
    assert history_location(f"file://localhost{local}") == local


def test_every_scheme_in_the_table_is_one_pyarrow_knows():
    # reference: pyarrow's URI schemes (pyarrow.fs.FileSystem.from_uri documentation)
    assert set(FILE_SYSTEMS) <= {"local", "file", "hdfs", "s3", "gs", "gcs", "abfs",
                                 "abfss", "az"}
    assert filesystem_guarantees("/tmp/kb").atomic_rename is True
    assert filesystem_guarantees("s3://bucket/kb").atomic_rename is False
    assert filesystem_guarantees("hdfs://nn/kb").atomic_rename is True
    assert not filesystem_guarantees("hdfs://nn/kb").usable
    with pytest.raises(BadInputError, match="unknown file system 'ftp'"):
        filesystem_guarantees("ftp://host/kb")


def test_a_history_made_and_filled_through_file_uris_is_the_local_one(tmp_path, iris_csv):
    local = tmp_path / "team kb"
    r = run("kb", "init", local.as_uri(), "--json")
    assert r.exit_code == 0, r.output
    assert json.loads(r.stdout)["path"] == str(local)
    trials = tmp_path / "trials.csv"
    trials.write_text("n_neighbors,score\n3,0.9\n7,0.95\n")
    r = run("log", iris_csv, "-t", "target", "-f", "knn", "--trials", trials,
            "--kb", local.as_uri())
    assert r.exit_code == 0, r.output + r.stderr
    by_uri = json.loads(run("kb", "info", "--kb", local.as_uri(), "--json").stdout)
    by_path = json.loads(run("kb", "info", "--kb", local, "--json").stdout)
    by_env = json.loads(run("kb", "info", "--json",
                            env={"WARMSTART_KB": local.as_uri()}).stdout)
    assert by_uri == by_path == by_env
    assert len(KnowledgeBase(local).tables()["trials"]) == 2


# a real process whose every socket call aborts it: refusal needs no network
OFFLINE = """
import contextlib, io, json, sys
def hook(event, args):
    if event.startswith("socket."):
        print("network: " + event, file=sys.stderr); sys.stderr.flush()
        import os; os._exit(99)
sys.addaudithook(hook)
from cli.main import main
out = []
for args in json.loads(sys.argv[1]):
    err = io.StringIO()
    with contextlib.redirect_stderr(err), contextlib.redirect_stdout(io.StringIO()) as o:
        try:
            main(args)
        except SystemExit as exc:
            out.append([exc.code, err.getvalue(), o.getvalue()])
print(json.dumps(out))
"""

REFUSED = [("s3://team-bucket/kb", "no atomic rename"),
           ("gs://team-bucket/kb", "no atomic rename"),
           ("abfs://box@acct/kb", "hierarchical namespace"),
           ("hdfs://namenode:8020/kb", "mount it")]


def test_file_systems_without_the_guarantee_are_refused_offline(iris_csv, tmp_path):
    trials = tmp_path / "trials.csv"
    trials.write_text("n_neighbors,score\n3,0.9\n")
    calls = []
    for uri, _ in REFUSED:
        calls += [["kb", "info", "--kb", uri], ["kb", "init", uri],
                  ["log", str(iris_csv), "-t", "target", "-f", "knn", "--trials",
                   str(trials), "--kb", uri]]
    p = subprocess.run([sys.executable, "-c", OFFLINE, json.dumps(calls)], cwd=tmp_path,
                       capture_output=True, text=True, timeout=300,
                       env={**os.environ, "PYTHONPATH": str(REPO)})
    assert p.returncode == 0, p.stderr  # 99 had it touched a socket
    results = json.loads(p.stdout)
    assert len(results) == len(calls)
    for call, (code, err, out) in zip(calls, results):
        uri, lacks = next(r for r in REFUSED if r[0] in call)
        assert code == 2, (call, err)
        assert err.count("\n") == 1 and err.startswith(f"error: history at {uri}"), err
        assert lacks in err and out == ""
    assert set(tmp_path.iterdir()) == {trials, iris_csv}  # nothing written, no directory
