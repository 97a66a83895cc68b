"""Every history command through a real server gives what it gives on the directory.

A real ``warmstart serve`` (uvicorn in a subprocess on a loopback port) serves a copy of
the demo history; each command runs with ``--json`` once with ``--kb`` on that copy and
once with ``--server`` against the server, and the two answers are compared (reference:
the same command on the directory, through the public CLI). Writes go to two copies that
start equal, one written directly and one through the server, and are compared the same
way. Fields that must differ are named where they are left out.
"""

from __future__ import annotations

import json
import shutil
from pathlib import Path

import pandas as pd
import pytest
from click.testing import CliRunner

import cli.common
from cli.main import main
from tests.test_service import (
    DEMO,
    EXAMPLE,
    TOKEN,
    TRIALS,
    _free_port,
    _private_file,
    _start,
    _stop,
)
from warmstart import KnowledgeBase
from warmstart.service import client

pytestmark = pytest.mark.filterwarnings("ignore::ResourceWarning")
DATA = [str(EXAMPLE), "--target", "churned"]
# (command, fields left out of the comparison and why)
READS = [
    (["kb", "info"], ()),
    (["kb", "check"], ()),
    (["kb", "list"], ()),
    (["kb", "show", "quillmarsh-basket-size"], ()),  # a dataset of the demo history, by name
    (["similar", *DATA, "-k", "4"], ()),
    (["suggest", *DATA, "--family", "hist_gradient_boosting", "-k", "4"], ()),
    (["suggest", *DATA, "--family", "knn", "-k", "3", "--strategy", "nearest-best"], ()),
    (["backtest", "--family", "knn", "--ks", "1,3", "--strategies", "nearest-best,defaults",
      "--random-repeats", "2"], ()),
]
# a new study's id and time are drawn when it is written, so two writes differ in them
NEW_STUDY = ("study_id", "created_at")


@pytest.fixture(scope="module")
def copies(tmp_path_factory):
    """Two equal copies of the demo history: ``direct`` for --kb, ``served`` behind a
    server that takes writes with ``TOKEN``."""
    tmp = tmp_path_factory.mktemp("both_ways")
    direct, served = tmp / "direct", tmp / "served"
    shutil.copytree(DEMO, direct)
    shutil.copytree(DEMO, served)
    url, proc = _start(served, tmp, "--token-file", str(_private_file(tmp / "tok", TOKEN)))
    yield direct, served, url
    _stop(proc)


def run(args: list[str], env: dict | None = None) -> tuple[int, str, str]:
    res = CliRunner().invoke(main, args, env={"WARMSTART_SERVER": None,
                                                               "WARMSTART_KB": None,
                                                               **(env or {})})
    return res.exit_code, res.stdout, res.stderr


def answer(args: list[str], env: dict | None = None):
    code, out, err = run([*args, "--json"], env)
    assert code == 0, err
    return json.loads(out)


def without(d, fields):
    if isinstance(d, dict):
        return {k: without(v, fields) for k, v in d.items() if k not in fields}
    if isinstance(d, list):
        return [without(v, fields) for v in d]
    return d


@pytest.mark.parametrize(("command", "left_out"), READS,
                         ids=[f"{i}-{' '.join(c[:2]) if c[0] == 'kb' else c[0]}"
                              for i, (c, _) in enumerate(READS)])
def test_reads_give_the_same_json_both_ways(copies, command, left_out):
    _, served, url = copies
    on_dir = answer([*command, "--kb", str(served)])
    through = answer([*command, "--server", url])
    assert without(through, left_out) == without(on_dir, left_out)
    # $WARMSTART_SERVER stands for --server, and an explicit --kb wins over it
    assert answer(command, env={"WARMSTART_SERVER": url}) == through
    assert answer([*command, "--kb", str(served)], env={"WARMSTART_SERVER": "http://127.0.0.1:1"}
                  ) == on_dir


def test_writes_give_the_same_json_both_ways(copies):
    direct, served, url = copies
    before = KnowledgeBase(served).info()
    log = ["log", *DATA, "--family", "hist_gradient_boosting", "--trials", str(TRIALS),
           "--name", "both-ways"]
    code, _, err = run([*log, "--server", url, "--json"])  # no token: refused, nothing written
    assert code == 2 and "WARMSTART_TOKEN" in err and err.count("\n") == 1
    assert KnowledgeBase(served).info() == before
    token = {"WARMSTART_TOKEN": TOKEN}
    logged = [answer([*log, "--kb", str(direct)]), answer([*log, "--server", url], token)]
    assert without(logged[0], NEW_STUDY) == without(logged[1], NEW_STUDY)
    assert logged[1]["trial_count"] == len(pd.read_csv(TRIALS))  # reference: the trials file
    # no --name: a known dataset keeps its name both ways (the client sends the file's
    # name only as the label of a new dataset)
    tune = ["tune", *DATA, "--family", "knn", "--budget", "2", "--cv", "2"]
    tuned = [answer([*tune, "--kb", str(direct)]), answer([*tune, "--server", url], token)]
    # fit times and the run's wall time are measured, not computed
    timing = ("seconds", "fit_seconds", "cv_seconds", *NEW_STUDY)
    assert without(tuned[0], timing) == without(tuned[1], timing)
    assert tuned[1]["logged"]["trial_count"] == 2
    # after the same writes both copies hold the same; the path and the bytes on disk
    # (file names carry each study's id) are where they must differ
    disk = ("path", "bytes_on_disk")
    info = [answer(["kb", "info", "--kb", str(direct)]), answer(["kb", "info", "--server", url])]
    assert without(info[0], disk) == without(info[1], disk)
    assert info[1]["studies"] == before["studies"] + 2
    checks = [answer(["kb", "check", "--kb", str(direct)]),
              answer(["kb", "check", "--server", url])]
    assert without(checks[0], disk) == without(checks[1], disk) and checks[1]["ok"]
    # deleting the logged study: refused without the token, then the same answer both ways
    ref = [logged[0]["study_id"], logged[1]["study_id"]]
    code, _, err = run(["kb", "delete", ref[1], "--server", url, "--json"])
    assert code == 2 and "WARMSTART_TOKEN" in err and err.count("\n") == 1
    assert KnowledgeBase(served).info()["studies"] == before["studies"] + 2
    gone = [answer(["kb", "delete", ref[0], "--kb", str(direct)]),
            answer(["kb", "delete", ref[1], "--server", url], token)]
    assert without(gone[0], NEW_STUDY) == without(gone[1], NEW_STUDY)
    listed = [answer(["kb", "list", "--kb", str(direct)]),
              answer(["kb", "list", "--server", url])]
    assert without(listed[0], NEW_STUDY) == without(listed[1], NEW_STUDY)
    assert KnowledgeBase(served).info()["studies"] == before["studies"] + 1


def test_network_errors_are_one_line(copies):
    _, _, url = copies
    down = f"http://127.0.0.1:{_free_port()}"
    for command in (["kb", "info"], ["suggest", *DATA, "--family", "knn"], ["kb", "check"]):
        code, out, err = run([*command, "--server", "nowhere"])
        assert code == 2 and err.startswith("error: bad server URL") and err.count("\n") == 1
        code, out, err = run([*command, "--server", down])
        assert code == 1 and "connection refused" in err and err.count("\n") == 1
        assert out == ""
    code, _, err = run(["kb", "info", "--server", "http://no-such-host.invalid:8765"])
    # reference: RFC 2606, .invalid never resolves
    assert code == 2 and "cannot resolve host" in err
    code, _, err = run(["kb", "info", "--server", url, "--kb", str(DEMO)])
    assert code == 2 and err == "error: give --kb or --server, not both\n"
    code, _, err = run(["kb", "compact", "--server", url])
    assert code == 2 and "works on the history's directory" in err


def test_locations_that_are_not_histories(tmp_path):
    code, _, err = run(["kb", "import", "https://example.org/history.zip", "--kb", str(DEMO)])
    assert code == 2 and err.count("\n") == 1
    assert "https://example.org/history.zip" in err and "file://" in err and "local" in err
    code, _, err = run(["kb", "info", "--kb", "s3://bucket/history"])
    assert code == 2 and err.count("\n") == 1 and "atomic rename" in err
    assert "kb init" not in err and not Path("s3:").exists()
    # the CLI's copy of the variable names (cli.common stays light) matches the client's
    assert (cli.common.SERVER_ENV, cli.common.TOKEN_ENV) == (client.SERVER_ENV,
                                                            client.TOKEN_ENV)
