"""Malformed input through the CLI: a one-line error naming the problem, exit code 2,
and the history byte-for-byte unchanged. Dirty but usable data is fingerprinted with
warnings instead (exit 0).
"""

from __future__ import annotations

import hashlib
import io
import json
import os
import shutil
import socket
import zipfile
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from click.testing import CliRunner
from sklearn.datasets import load_iris

from cli.main import main
from tests.conftest import dir_digest
from tests.test_history_hardening import declared_size, iris_parquet, text_scores_parquet
from warmstart import Fingerprint, fingerprint
from warmstart.history import KnowledgeBase
from warmstart.maintenance import EXPORT_MARKER

GOOD_TRIALS = "n_estimators,max_depth,score,fit_seconds\n100,4,0.95,0.3\n200,,0.96,0.5\n"
PNG = b"\x89PNG\r\n\x1a\n\x00\x00\x00\rIHDR" + bytes(range(256))


class Work:
    """Files for one case: a history with one study in it, a dataset, trials, fingerprint."""

    def __init__(self, root: Path, template: Path | None = None):
        self.root = root
        self.data, self.trials = root / "iris.csv", root / "trials.csv"
        self.fp_file = root / "fp.json"
        if template is not None:  # a copy of a prepared one: fast, same bytes
            shutil.copytree(template, root, dirs_exist_ok=True)
            self.kb = root / "kb"
            self.fp = Fingerprint.from_json_file(self.fp_file)
            return
        self.kb = KnowledgeBase.init(root / "kb").path
        # reference dataset: scikit-learn's bundled iris (150 rows, 3 classes)
        frame = load_iris(as_frame=True).frame
        self.write("iris.csv", frame.to_csv(index=False))
        self.write("trials.csv", GOOD_TRIALS)
        self.fp = fingerprint(frame, target="target")
        self.write("fp.json", self.fp.to_json())
        r = CliRunner().invoke(main, self.log())
        assert r.exit_code == 0, r.output

    def write(self, name: str, content: str | bytes) -> Path:
        p = self.root / name
        if isinstance(content, str):
            content = content.encode("utf-8")
        p.write_bytes(content)
        return p

    def log(self, data=None, trials=None, *extra, family="random_forest", target="target"):
        args = ["log", str(data or self.data), "-t", target, "-f", family,
                "--trials", str(trials or self.trials), "--kb", str(self.kb)]
        return args + list(map(str, extra))

    def log_trials(self, csv: str, *extra, name="bad.csv"):
        return self.log(None, self.write(name, csv), *extra)

    def log_fp(self, fp_obj, *extra):
        path = self.write("bad-fp.json", fp_obj if isinstance(fp_obj, str)
                          else json.dumps(fp_obj))
        return ["log", "--fingerprint", str(path), "-f", "random_forest", "--trials",
                str(self.trials), "--kb", str(self.kb), *map(str, extra)]

    def suggest(self, *extra):
        return ["suggest", str(self.data), "-t", "target", "-f", "random_forest",
                "--kb", str(self.kb), *map(str, extra)]

    def tune(self, *extra):
        return ["tune", str(self.data), "-t", "target", "-f", "random_forest", "-n", "2",
                "--cv", "2", "--kb", str(self.kb), *map(str, extra)]

    def space(self, spec) -> Path:
        return self.write("space.json", json.dumps(spec))

    def fp_dict(self, **change):
        return {**self.fp.to_dict(), **change}

    def fp_values(self, **change):
        d = self.fp.to_dict()
        return {**d, "meta_features": {**d["meta_features"], **change}}

    def marker(self, version) -> list[str]:
        """The history's marker with ``format_version`` set to ``version``; then log."""
        path = self.kb / "warmstart-history.json"
        path.write_text(json.dumps({**json.loads(path.read_text()),
                                    "format_version": version}))
        return self.log()

    def import_(self, marker: dict | None = None, drop: str | None = None,
                **replace: bytes) -> list[str]:
        """``kb import`` of this history's export, its marker updated with ``marker``,
        member ``drop`` left out, members replaced (``trials=b"..."``)."""
        export = self.root / "export.zip"
        KnowledgeBase(self.kb).export(export)
        crafted = self.root / "crafted.zip"
        with zipfile.ZipFile(export) as zin, zipfile.ZipFile(crafted, "w") as zout:
            for name in zin.namelist():
                data = zin.read(name)
                if name == EXPORT_MARKER and marker is not None:
                    data = json.dumps({**json.loads(data), **marker}).encode()
                if name != drop:
                    zout.writestr(name, replace.get(name.removesuffix(".parquet"), data))
        return ["kb", "import", str(crafted), "--kb", str(self.kb)]

    def edited_trials(self) -> bytes:
        with zipfile.ZipFile(self.root / "export.zip") as zf:
            frame = pq.read_table(io.BytesIO(zf.read("trials.parquet"))).to_pandas()
        frame["score"] = frame["score"] + 0.01
        buf = io.BytesIO()
        pq.write_table(pa.Table.from_pandas(frame, preserve_index=False), buf)
        return buf.getvalue()

    def foreign(self, where: str, content: bytes, command: str = "info") -> list[str]:
        (self.kb / where).write_bytes(content)
        return ["kb", command, "--kb", str(self.kb)]


def _import_declaring(w: Work, size: int) -> list[str]:
    """An import of an export whose trials member declares ``size`` bytes."""
    args = w.import_()
    declared_size(Path(args[2]), "trials.parquet", size)
    return args


def _import_lying(w: Work) -> list[str]:
    """An import whose trials member inflates to 16 MiB of zeros but declares 100 bytes."""
    args = w.import_(drop="trials.parquet")
    with zipfile.ZipFile(args[2], "a", compression=zipfile.ZIP_DEFLATED) as zf:
        zf.writestr("trials.parquet", bytes(16 << 20))
    declared_size(Path(args[2]), "trials.parquet", 100)
    return args


def _socket(path: Path) -> Path:
    """A listening Unix socket at ``path`` (it stays bound for the test's duration)."""
    sock = socket.socket(socket.AF_UNIX)
    sock.bind(str(path))
    _SOCKETS.append(sock)
    return path


_SOCKETS: list[socket.socket] = []


@pytest.fixture(scope="module")
def template(tmp_path_factory) -> Path:
    root = tmp_path_factory.mktemp("template")
    Work(root)
    return root


CASES = [  # id, builder(w) -> CLI args, substring the error must contain
    # the dataset
    ("empty data file", lambda w: w.log(w.write("e.csv", "")), "file is empty"),
    ("header only", lambda w: w.log(w.write("h.csv", "a,b,target\n")), "no rows"),
    ("one row", lambda w: w.log(w.write("o.csv", "a,target\n1,2\n")),
     "fewer than two non-missing"),
    ("target column missing", lambda w: w.log(None, None, target="nope"),
     "target column 'nope' not found"),
    ("constant target", lambda w: w.log(w.write("c.csv", "a,target\n1,0\n2,0\n3,0\n")),
     "is constant"),
    ("duplicate column names", lambda w: w.log(w.write("d.csv", "a,a,target\n1,2,0\n3,4,1\n")),
     "duplicate column names: a"),
    ("undecodable bytes", lambda w: w.log(w.write("u.csv", b"a,target\n\xe9t\xe9,1\nx,0\n")),
     "not UTF-8"),
    ("PNG named .csv", lambda w: w.log(w.write("img.csv", PNG)), "not a text table"),
    ("random binary named .parquet",
     lambda w: w.log(w.write("r.parquet", np.random.default_rng(0).bytes(512))),
     "not a Parquet file"),
    ("data file missing", lambda w: w.log(w.root / "absent.csv"), "file not found"),
    ("data path is a directory of other files", lambda w: w.log(w.root),
     "a data directory holds only Parquet files"),
    ("ragged CSV rows", lambda w: w.log(w.write("g.csv", "a,target\n1,0\n2,1,7,8\n3,0\n")),
     "could not read"),
    # the trials table
    ("NaN score on an ok trial", lambda w: w.log_trials("n_estimators,score\n100,nan\n"),
     "needs a finite numeric score"),
    ("infinite score", lambda w: w.log_trials("n_estimators,score\n100,inf\n"),
     "score must be finite"),
    ("non-numeric score", lambda w: w.log_trials("n_estimators,score\n100,high\n"),
     "score must be a number"),
    ("score outside the metric's range",
     lambda w: w.log_trials("n_estimators,score\n100,1.5\n"), "outside the range"),
    ("positive score for a neg_ loss",
     lambda w: w.log_trials("n_estimators,score\n100,0.3\n", "--metric", "neg_log_loss"),
     "outside the range"),
    ("no score column", lambda w: w.log_trials("n_estimators,fit_seconds\n100,0.2\n"),
     "no 'score' column"),
    ("parameter the family does not have",
     lambda w: w.log_trials("n_neighbors,score\n5,0.9\n"), "does not declare"),
    ("value of the wrong type", lambda w: w.log_trials("n_estimators,score\nlots,0.9\n"),
     "The 'n_estimators' parameter of RandomForestClassifier must be an int"),
    ("value outside its bounds", lambda w: w.log_trials("n_estimators,score\n0,0.9\n"),
     "must be an int in the range [1, inf). Got 0 instead"),
    ("categorical value not declared",
     lambda w: w.log_trials("criterion,score\nfuzzy,0.9\n"), "must be a str among"),
    ("unknown family", lambda w: w.log(None, None, family="deep_forest"),
     "unknown model family 'deep_forest'"),
    ("malformed JSON-lines trials",
     lambda w: w.log_trials('{"n_estimators": 100, "score": 0.9}\n{"n_est\n', name="t.jsonl"),
     "could not read"),
    ("negative fit time",
     lambda w: w.log_trials("n_estimators,score,fit_seconds\n100,0.9,-3\n"),
     "fit_seconds must not be negative"),
    ("unknown status", lambda w: w.log_trials("n_estimators,score,status\n100,0.9,done\n"),
     "status must be 'ok' or 'failed'"),
    ("empty trials file", lambda w: w.log_trials(""), "file is empty"),
    ("trials header only", lambda w: w.log_trials("n_estimators,score\n"), "no rows"),
    ("duplicate trials columns", lambda w: w.log_trials("score,score\n0.9,0.8\n"),
     "duplicate column names: score"),
    ("trials file is a PNG", lambda w: w.log(None, w.write("t.png", PNG)),
     "not a text table"),
    # metric
    ("unknown metric without which way is better",
     lambda w: w.log(None, None, "--metric", "team_lift"), "say which way is better"),
    ("scikit-learn scorer declared lower-is-better",
     lambda w: w.log(None, None, "--metric", "accuracy", "--lower-is-better"),
     "higher-is-better"),
    # fingerprint JSON
    ("malformed fingerprint JSON", lambda w: w.log_fp('{"kind": "warmstart-fing'),
     "is not valid JSON"),
    ("fingerprint of an unknown catalogue version",
     lambda w: w.log_fp(w.fp_dict(catalogue_version=99)), "unknown catalogue version 99"),
    ("JSON that is not a fingerprint", lambda w: w.log_fp([1, 2, 3]),
     "not a warmstart fingerprint"),
    ("fingerprint with a non-hex dataset hash",
     lambda w: w.log_fp(w.fp_dict(dataset_hash="z" * 64)), "not 64 hex digits"),
    ("fingerprint task differs from --task",
     lambda w: w.log_fp(w.fp_dict(), "--task", "regression"), "the fingerprint is for"),
    # the history itself
    ("history path is a file",
     lambda w: w.log()[:-1] + [str(w.write("not-a-dir", "x"))], "is a file"),
    ("history path is not a history",
     lambda w: w.log()[:-1] + [str(w.root)], "not a warmstart history"),
    ("history of a newer format", lambda w: (
        (w.kb / "warmstart-history.json").write_text('{"format_version": 9}'), w.log())[1],
     "upgrade"),
    ("import of a file that is not an export",
     lambda w: ["kb", "import", str(w.write("x.zip", PNG)), "--kb", str(w.kb)],
     "not a warmstart export"),
    ("negative grace period", lambda w: ["kb", "check", "--kb", str(w.kb), "--grace", "-5"],
     "grace period"),
    # paths the system refuses (an OSError must never become a traceback)
    ("5,000-character data path", lambda w: w.log(w.root / ("d" * 5000 + ".csv")),
     "File name too long"),
    ("5,000-character trials path", lambda w: w.log(None, w.root / ("t" * 5000 + ".csv")),
     "File name too long"),
    ("5,000-character --kb path", lambda w: w.log()[:-1] + [str(w.root / ("k" * 5000))],
     "File name too long"),
    ("5,000-character --fingerprint path",
     lambda w: w.log_fp("{}")[:2] + [str(w.root / ("f" * 5000))] + w.log_fp("{}")[3:],
     "File name too long"),
    ("data path through a file", lambda w: w.log(w.data / "inner.csv"), "Not a directory"),
    ("a socket as data", lambda w: w.log(_socket(w.root / "s.csv")), "is a socket"),
    ("a device as data", lambda w: w.log(Path(os.devnull)), "is a device"),
    ("a device as trials", lambda w: w.log(None, Path(os.devnull)), "is a device"),
    ("export to a folder that does not exist",
     lambda w: ["kb", "export", str(w.root / "nowhere" / "x.zip"), "--kb", str(w.kb)],
     "does not exist"),
    ("export into /proc", lambda w: ["kb", "export", "/proc/x.zip", "--kb", str(w.kb)],
     "No such file or directory"),
    # --space files with wrong types
    ("--space low is text", lambda w: w.suggest("--space", w.space([{"name": "n_estimators",
                                                                      "low": "abc"}])),
     "must lie inside [10, 1000]"),
    ("--space name is a list", lambda w: w.suggest("--space", w.space([{"name": ["x"]}])),
     "unknown parameter ['x']"),
    ("--space choices is a number",
     lambda w: w.suggest("--space", w.space([{"name": "criterion", "choices": 5}])),
     "must be a non-empty subset"),
    ("--space file is not a list", lambda w: w.suggest("--space", w.space({"a": 1})),
     "must be a JSON list"),
    # click's usage errors: one line naming --help
    ("-k 0", lambda w: w.suggest("-k", "0"), "(see 'warmstart suggest --help')"),
    ("--budget abc", lambda w: ["tune", str(w.data), "-t", "target", "-f", "linear",
                                "--budget", "abc", "--kb", str(w.kb)],
     "'abc' is not a valid integer. (see 'warmstart tune --help')"),
    ("unknown option", lambda w: w.log("--colour"), "No such option '--colour'"),
    ("unknown command", lambda w: ["fingerprnt", str(w.data)], "(see 'warmstart --help')"),
    ("negative --max-fit-seconds", lambda w: w.suggest("--max-fit-seconds", "-1"),
     "--max-fit-seconds"),
    ("both metric directions", lambda w: w.log(None, None, "--metric", "team_lift",
                                               "--higher-is-better", "--lower-is-better"),
     "contradict each other"),
    # kb show / delete: names that match nothing, or too much
    ("kb show of an unknown name", lambda w: ["kb", "show", "no-such-data", "--kb", str(w.kb)],
     "no study or dataset 'no-such-data'"),
    ("kb show of a blank name", lambda w: ["kb", "show", " ", "--kb", str(w.kb)],
     "name a study or dataset"),
    ("kb show of a 2-digit prefix", lambda w: ["kb", "show", "ab", "--kb", str(w.kb)],
     "no study or dataset 'ab'"),
    ("kb delete of an unknown label", lambda w: ["kb", "delete", "iris-x", "--kb", str(w.kb)],
     "no study 'iris-x'"),
    ("kb delete of an unknown id",
     lambda w: ["kb", "delete", "0" * 32, "--kb", str(w.kb)], "no study '0000"),
    ("kb delete without a study", lambda w: ["kb", "delete", "--kb", str(w.kb)],
     "Missing argument 'STUDY'"),
    # outputs checked before any work
    ("tune --out in a missing folder",
     lambda w: w.tune("--out", w.root / "nowhere" / "best.json"), "does not exist"),
    ("tune --out is a directory", lambda w: w.tune("--out", w.root), "is a directory"),
    ("backtest --plot in /proc",
     lambda w: ["backtest", "-f", "random_forest", "--plot", "/proc/regret.png", "--kb",
                str(w.kb)], "cannot write the plot"),
    # format versions are JSON integers, in the history's marker and in exports alike
    ("marker version is the string \"1\"", lambda w: w.marker("1"),
     "format_version '1' is not a format version"),
    ("marker version is 1.5", lambda w: w.marker(1.5), "format_version 1.5 is not a"),
    ("marker version is true", lambda w: w.marker(True), "format_version True is not a"),
    ("export version is the string \"1\"", lambda w: w.import_({"format_version": "1"}),
     "format_version '1' is not a format version"),
    ("export version is 1.5", lambda w: w.import_({"format_version": 1.5}),
     "format_version 1.5 is not a"),
    ("export version is true", lambda w: w.import_({"format_version": True}),
     "format_version True is not a"),
    # exports are verified, and read within a bound
    ("export with an edited trials table",
     lambda w: (w.import_(), w.import_(trials=w.edited_trials()))[1], "content hash"),
    ("export marker without a content hash", lambda w: w.import_({"content_hash": None}),
     "no content_hash"),
    ("export without its studies table", lambda w: w.import_(drop="studies.parquet"),
     "missing studies.parquet"),
    ("export member declaring 3 GiB", lambda w: _import_declaring(w, 3 << 30),
     "kb import reads at most 2,147,483,648"),
    ("export member lying about its size", _import_lying, "Bad CRC-32"),
    ("export member of 16 MiB of zeros", lambda w: w.import_(trials=bytes(16 << 20)),
     "Parquet magic bytes not found"),
    # foreign files in table folders: one line pointing to kb check --repair
    ("a data set copied into datasets/",
     lambda w: w.foreign("datasets/copy.parquet", iris_parquet()), "kb check --repair"),
    ("a text file named .parquet in studies/",
     lambda w: w.foreign("studies/notes.parquet", b"ask about churn\n"),
     "studies/notes.parquet is not one of its files"),
    ("trials/ file with text scores, then compact",
     lambda w: w.foreign("trials/t.parquet", text_scores_parquet(), "compact"),
     "(column 'score' is string, not double)"),
    # fingerprint values inside the catalogue's ranges
    ("fingerprint with rows = -5", lambda w: w.log_fp(w.fp_values(rows=-5)),
     "'rows' is -5, outside its range [1, inf)"),
    ("fingerprint with a proportion of 1.7",
     lambda w: w.log_fp(w.fp_values(majority_class_share=1.7)),
     "'majority_class_share' is 1.7, outside its range (0, 1]"),
    ("fingerprint with 2.5 classes", lambda w: w.log_fp(w.fp_values(classes=2.5)),
     "'classes' is 2.5, not a whole number"),
    ("fingerprint with more missingness patterns than rows",
     lambda w: w.log_fp(w.fp_values(missing_pattern_count=151)),
     "outside its range [1, rows]"),
    ("fingerprint catalogue version true",
     lambda w: w.log_fp(w.fp_dict(catalogue_version=True)), "unknown catalogue version True"),
]


@pytest.mark.parametrize("build, expected", [c[1:] for c in CASES], ids=[c[0] for c in CASES])
def test_malformed_input_is_refused_and_nothing_written(tmp_path, template, build, expected):
    w = Work(tmp_path / "w", template)
    args = build(w)
    before = dir_digest(w.kb)
    r = CliRunner().invoke(main, args)
    assert r.exit_code == 2, (r.output, r.exception)
    lines = r.output.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("error: "), r.output
    assert expected in lines[0], lines[0]
    assert dir_digest(w.kb) == before


def test_at_least_eighty_five_distinct_malformed_inputs(tmp_path, template):
    # Each case is a different input, not another name for one already listed: its
    # arguments, with files replaced by their bytes and directories by their place,
    # together with the state of its history (reference: common practice).
    inputs = set()
    for i, (_name, build, _expected) in enumerate(CASES):
        w = Work(tmp_path / f"w{i}", template)
        args = build(w)

        def content(arg: str, w=w) -> str:
            path = Path(arg)
            if not path.is_relative_to(w.root) or len(path.name) > 255:
                return arg  # a name too long to look up is its own content
            if path.is_file():
                return "file " + hashlib.sha256(path.read_bytes()).hexdigest()
            return ("dir " if path.is_dir() else "absent ") + str(path.relative_to(w.root))

        inputs.add((tuple(map(content, args)), tuple(sorted(dir_digest(w.kb).items()))))
    assert len(inputs) == len(CASES) >= 85


def test_read_only_history_is_refused(tmp_path, template, monkeypatch):
    w = Work(tmp_path / "w", template)
    before = dir_digest(w.kb)
    if os.geteuid() == 0:  # root ignores chmod: simulate the check the library makes
        real = os.access
        monkeypatch.setattr(os, "access", lambda p, mode, **kw: False if (
            mode & os.W_OK and Path(p).is_relative_to(w.kb)) else real(p, mode, **kw))
    else:
        for d in [w.kb, *(p for p in w.kb.iterdir() if p.is_dir())]:
            d.chmod(0o555)
    try:
        r = CliRunner().invoke(main, w.log())
    finally:
        for d in [w.kb, *(p for p in w.kb.iterdir() if p.is_dir())]:
            d.chmod(0o755)
    assert r.exit_code == 2 and "read-only" in r.output
    assert dir_digest(w.kb) == before


# -- dirty but usable: fingerprinted with warnings ----------------------------------------
def _dirty(name: str, n: int = 200) -> pd.DataFrame:
    rng = np.random.default_rng(3)
    y = rng.integers(0, 2, n)
    x = rng.normal(size=n)
    df = pd.DataFrame({"x": x, "target": y})
    if name == "all-missing column":
        df["empty"] = np.nan
    elif name == "constant column":
        df["same"] = 7
    elif name == "infinite values":
        df.loc[::10, "x"] = np.inf
    elif name == "100,000-level categorical":
        n = 100_000
        df = pd.DataFrame({"x": rng.normal(size=n), "code": [f"c{i}" for i in range(n)],
                           "target": rng.integers(0, 2, n)})
    elif name == "mixed types":
        df["mix"] = pd.Series([5 if i % 3 == 0 else f"t{i}" for i in range(n)], dtype=object)
    return df


@pytest.mark.parametrize("name, warning", [
    ("all-missing column", "all-missing columns dropped: empty"),
    ("constant column", "constant columns dropped: same"),
    ("infinite values", "infinite values treated as missing in: x"),
    # 100,000 levels in 100,000 rows: an identifier, not a feature
    ("100,000-level categorical", "identifier-like columns (unique per row) dropped: code"),
    ("mixed types", "mixed types (numbers and text)"),
])
def test_dirty_data_is_fingerprinted_with_warnings(tmp_path, name, warning):
    df = _dirty(name)
    path = tmp_path / "dirty.parquet" if len(df) > 1000 else tmp_path / "dirty.csv"
    if path.suffix == ".csv":
        df.to_csv(path, index=False)
    else:
        df.to_parquet(path)
    r = CliRunner().invoke(main, ["fingerprint", str(path), "-t", "target", "--json"])
    assert r.exit_code == 0, r.output
    out = json.loads(r.stdout)
    assert any(warning in w for w in out["warnings"]), out["warnings"]


def test_semicolon_separated_file_is_read_with_its_delimiter(tmp_path):
    # A European-style CSV: ';' between fields. Read as one column it would be useless.
    df = load_iris(as_frame=True).frame
    path = tmp_path / "semi.csv"
    df.to_csv(path, index=False, sep=";")
    r = CliRunner().invoke(main, ["fingerprint", str(path), "-t", "target", "--json"])
    assert r.exit_code == 0, r.output
    out = json.loads(r.stdout)
    comma = fingerprint(df, target="target")
    assert out["dataset_hash"] == comma.dataset_hash  # the same table as the ',' file
