"""The HTTP service with its real parts: a uvicorn server in a subprocess on loopback over a
copy of the demo history, the standard-library client, and headless Chromium.

Client answers are compared with the KnowledgeBase's on the same directory (reference:
the library itself, through its public API); refused requests are checked to leave the
history byte for byte as it was (reference: SHA-256 of every file).
"""

from __future__ import annotations

import base64
import hashlib
import http.client
import json
import os
import shutil
import socket
import subprocess
import sys
import time
import urllib.error
import urllib.request
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from click.testing import CliRunner

from cli.serve import map_cmd, report_cmd, serve_cmd
from tests.conftest import dir_digest
from warmstart import Client, KnowledgeBase, NothingToSuggestError, fingerprint
from warmstart.backtest import backtest
from warmstart.errors import BadInputError
from warmstart.service import maps, wire
from warmstart.service.errors import NotAuthorisedError, ServiceUnavailableError
from warmstart.service.security import exposure_warnings

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "knowledge_base"
EXAMPLE = ROOT / "examples" / "quillmarsh_loyalty_churn.csv"
TRIALS = ROOT / "examples" / "quillmarsh_loyalty_churn_trials.csv"
ARTIFACTS = ROOT / "tests" / "artifacts"
CHROMIUM = shutil.which("chromium") or ("/usr/bin/chromium" if Path("/usr/bin/chromium")
                                        .exists() else None)
TOKEN = "write-token-" + "a1b2c3d4" * 3
READ_TOKEN = "read-token-" + "e5f6a7b8" * 3
pytestmark = pytest.mark.filterwarnings("ignore::ResourceWarning")


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def _private_file(path: Path, text: str) -> Path:
    path.write_text(text + "\n")
    path.chmod(0o600)
    return path


def _start(history: Path, tmp: Path, *extra: str) -> tuple[str, subprocess.Popen]:
    port = _free_port()
    env = {k: v for k, v in os.environ.items()
           if k not in ("WARMSTART_TOKEN", "WARMSTART_READ_TOKEN", "WARMSTART_SERVER")}
    proc = subprocess.Popen(
        [sys.executable, "-m", "cli.serve", "--kb", str(history), "--port", str(port), *extra],
        cwd=ROOT, env=env, stdout=subprocess.PIPE, stderr=subprocess.STDOUT)
    url = f"http://127.0.0.1:{port}"
    deadline = time.monotonic() + 40
    while time.monotonic() < deadline:
        if proc.poll() is not None:
            raise RuntimeError(f"server exited: {proc.stdout.read().decode()}")
        try:
            with urllib.request.urlopen(url + "/health", timeout=2) as r:
                if r.status == 200:
                    return url, proc
        except OSError:
            time.sleep(0.2)
    proc.kill()
    raise RuntimeError("server did not answer /health within 40 s")


def _stop(proc: subprocess.Popen) -> None:
    proc.terminate()
    try:
        proc.wait(timeout=10)
    except subprocess.TimeoutExpired:
        proc.kill()


@pytest.fixture(scope="module")
def history(tmp_path_factory) -> Path:
    path = tmp_path_factory.mktemp("served") / "kb"
    shutil.copytree(DEMO, path)
    return path


@pytest.fixture(scope="module")
def server(history, tmp_path_factory):
    tmp = tmp_path_factory.mktemp("server")
    url, proc = _start(history, tmp, "--token-file", str(_private_file(tmp / "tok", TOKEN)))
    yield url
    _stop(proc)


@pytest.fixture(scope="module")
def locked(history, tmp_path_factory):
    """A second server over the same history whose reads need a token too."""
    tmp = tmp_path_factory.mktemp("locked")
    url, proc = _start(history, tmp, "--token-file", str(_private_file(tmp / "w", TOKEN)),
                       "--read-token-file", str(_private_file(tmp / "r", READ_TOKEN)))
    yield url
    _stop(proc)


@pytest.fixture(scope="module")
def query():
    return fingerprint(EXAMPLE, target="churned")


def call(url: str, method: str = "GET", body=None, token: str | None = None,
         raw: bytes | None = None, headers: dict | None = None):
    """(status, headers, text) of one request, errors included."""
    data = raw if raw is not None else (None if body is None else json.dumps(body).encode())
    req = urllib.request.Request(url, data=data, method=method)
    req.add_header("Content-Type", "application/json")
    if token:
        req.add_header("Authorization", f"Bearer {token}")
    for k, v in (headers or {}).items():
        req.add_header(k, v)
    try:
        with urllib.request.urlopen(req, timeout=60) as r:
            return r.status, r.headers, r.read().decode()
    except urllib.error.HTTPError as exc:
        return exc.code, exc.headers, exc.read().decode()


def same(a, b) -> bool:
    return json.dumps(wire.jsonable(a), sort_keys=True) == json.dumps(wire.jsonable(b),
                                                                      sort_keys=True)


def _no_trace(text: str) -> None:
    assert "Traceback" not in text and 'File "' not in text


# -- the API and the client against the directory ---------------------------------------------
def test_health_and_openapi(server):
    status, _, text = call(server + "/health")
    assert status == 200 and json.loads(text)["writes"] is True
    status, _, text = call(server + "/openapi.json")
    doc = json.loads(text)
    assert status == 200 and doc["openapi"].startswith("3.")  # reference: OpenAPI 3 spec
    for path in ("/api/info", "/api/similar", "/api/suggest", "/api/log", "/api/datasets",
                 "/api/studies", "/api/tables", "/api/backtest/{family}", "/api/check"):
        assert path in doc["paths"], path
    assert "k" in doc["components"]["schemas"]["SuggestRequest"]["properties"]


def test_client_reads_equal_knowledge_base(server, history, query):
    kb, client = KnowledgeBase(history), Client(server)
    assert client.info() == kb.info()
    assert same([n.to_dict() for n in client.similar(fingerprint_of=query, k=5)],
                [n.to_dict() for n in kb.similar(fingerprint_of=query, k=5)])
    for kwargs in ({"family": "hist_gradient_boosting", "k": 5},
                   {"family": "random_forest", "k": 3, "strategy": "nearest-best",
                    "max_fit_seconds": 5.0},
                   {"family": "knn", "k": 4, "strategy": "random", "seed": 3,
                    "space": [{"name": "n_neighbors", "low": 3, "high": 15}]}):
        got = client.suggest(fingerprint_of=query, **kwargs)
        assert all(type(s).__name__ == "Suggestion" for s in got)
        assert same([s.to_dict() for s in got],
                    [s.to_dict() for s in kb.suggest(fingerprint_of=query, **kwargs)])
    theirs, ours = client.tables(family="knn"), kb.tables(family="knn")
    for name in ours:
        pd.testing.assert_frame_equal(theirs[name], ours[name])
    assert same({i: f.to_dict() for i, f in client.fingerprints().items()},
                {i: f.to_dict() for i, f in kb.fingerprints().items()})
    assert client.check().to_dict() == kb.check().to_dict()


def test_client_fingerprints_locally_and_backtests(server, history):
    kb, client = KnowledgeBase(history), Client(server)
    assert same([n.to_dict() for n in client.similar(EXAMPLE, target="churned", k=3)],
                [n.to_dict() for n in kb.similar(EXAMPLE, target="churned", k=3)])
    args = dict(family="knn", ks=(1, 3), strategies=["portfolio", "random"], random_repeats=2)
    got = client.backtest(**args)
    want = backtest(kb, args["family"], args["ks"], args["strategies"], random_repeats=2)
    assert same(got.to_dict(), want.to_dict())


def test_log_through_client_equals_directory(server, history, query, tmp_path):
    other = tmp_path / "kb"
    shutil.copytree(DEMO, other)
    before = KnowledgeBase(history).info()["studies"]
    logged = Client(server, token=TOKEN).log(fingerprint_of=query, family="hist_gradient_boosting",
                                             trials=TRIALS, name="churn-q3")
    direct = KnowledgeBase(other).log(fingerprint_of=query, family="hist_gradient_boosting",
                                      trials=TRIALS, name="churn-q3")
    assert type(logged).__name__ == "LoggedStudy"
    assert {**logged.to_dict(), "study_id": ""} == {**direct.to_dict(), "study_id": ""}
    kb = KnowledgeBase(history)
    assert kb.info()["studies"] == before + 1 and kb.check().ok
    studies = kb.tables()["studies"]
    assert logged.study_id in set(studies["study_id"])


def test_data_pages(server, history):
    kb = KnowledgeBase(history)
    n = kb.info()["datasets"]
    status, _, text = call(server + "/api/datasets")
    rows = json.loads(text)
    assert status == 200 and len(rows) == n
    pick = rows[0]["dataset_id"]
    detail = json.loads(call(server + f"/api/datasets/{pick}")[2])
    assert len(detail["neighbours"]) == 5
    assert pick not in {x["dataset_id"] for x in detail["neighbours"]}
    assert detail["fingerprint"] == kb.fingerprints()[pick].to_dict() or same(
        detail["fingerprint"], kb.fingerprints()[pick].to_dict())
    studies = json.loads(call(server + "/api/studies?family=knn")[2])
    assert len(studies) == int((kb.tables()["studies"]["family"] == "knn").sum())
    assert all(s["best_score"] is not None for s in studies)
    status, headers, svg = call(server + "/api/map.svg")
    assert status == 200 and headers["Content-Type"].startswith("image/svg+xml")
    assert svg.count("data-dataset=") == n
    assert call(server + "/api/datasets/nope")[0] == 404
    status, _, placed = call(server + "/api/map", "POST", {
        "fingerprint": fingerprint(EXAMPLE, target="churned").to_dict(), "label": "q"})
    assert status == 200 and 'id="query"' in placed and placed.count("data-dataset=") == n
    # the page's one script runs under the content security policy: its hash is allowed
    status, headers, page = call(server + "/")
    script = page.split("<script>", 1)[1].split("</script>", 1)[0]
    digest = base64.b64encode(hashlib.sha256(script.encode()).digest()).decode()
    policy = headers["Content-Security-Policy"]
    assert f"'sha256-{digest}'" in policy and "default-src 'none'" in policy
    status, _, text = call(server + "/families/knn")
    assert status == 200 and "<h1>knn</h1>" in text


# -- security -------------------------------------------------------------------------------------
def test_writes_without_or_with_wrong_token_are_refused(server, history, query):
    body = {"fingerprint": query.to_dict(), "family": "knn",
            "trials": [{"n_neighbors": 5, "score": 0.7}]}
    before = dir_digest(history)
    for token in (None, "x" * 40, TOKEN[:-1] + "z"):
        status, headers, text = call(server + "/api/log", "POST", body, token=token)
        assert status == 401, text
        assert headers["WWW-Authenticate"].startswith("Bearer")
    # refused before the body is even parsed
    assert call(server + "/api/log", "POST", raw=b"{not json")[0] == 401
    with pytest.raises(NotAuthorisedError) as err:
        Client(server, token="y" * 32).log(fingerprint_of=query, family="knn",
                                            trials=[{"n_neighbors": 5, "score": 0.7}])
    assert err.value.exit_code == 2
    with pytest.raises(NotAuthorisedError):
        Client(server, token="y" * 32)._check_writable()
    Client(server, token=TOKEN)._check_writable()  # the right token: no error
    # every DELETE is a write: refused without the right token before any route runs
    sid = KnowledgeBase(history).tables()["studies"]["study_id"].iloc[0]
    for token in (None, "x" * 40):
        assert call(server + f"/api/studies/{sid}", "DELETE", token=token)[0] == 401
    assert dir_digest(history) == before


def test_body_limit(server, history):
    before = dir_digest(history)
    big = b'{"k": 5, "fingerprint": {"pad": "' + b"x" * (9 * 1024 * 1024) + b'"}}'
    assert call(server + "/api/similar", "POST", raw=big)[0] == 413
    status, _, text = call(server + "/api/log", "POST", raw=big, token=TOKEN)
    assert status == 413 and "larger than" in json.loads(text)["error"]
    host, port = server.removeprefix("http://").split(":")
    # the same without a Content-Length: counted while it arrives
    conn = http.client.HTTPConnection(host, int(port), timeout=30)
    chunks = (b"x" * 65536 for _ in range(160))  # 10 MiB
    conn.request("POST", "/api/log", body=chunks, encode_chunked=True,
                 headers={"Authorization": f"Bearer {TOKEN}",
                          "Content-Type": "application/json"})
    assert conn.getresponse().status == 413
    conn.close()
    # a huge announced length is answered before any of the body is sent
    with socket.create_connection((host, int(port)), timeout=30) as s:
        s.sendall(b"POST /api/log HTTP/1.1\r\nHost: x\r\nContent-Type: application/json\r\n"
                  b"Authorization: Bearer " + TOKEN.encode() + b"\r\n"
                  b"Content-Length: 1000000000\r\n\r\n")
        assert s.recv(200).startswith(b"HTTP/1.1 413")
    assert dir_digest(history) == before


def test_schema_errors_name_the_problem(server, history, query):
    fp = query.to_dict()
    before = dir_digest(history)
    cases = [("/api/suggest", {"fingerprint": fp, "family": "knn", "k": 0}, "k"),
             ("/api/suggest", {"fingerprint": fp}, "family"),
             ("/api/similar", {"fingerprint": fp, "kk": 3}, "kk"),
             ("/api/log", {"fingerprint": fp, "family": "knn", "trials": []}, "trials"),
             ("/api/log", {"fingerprint": fp, "family": "knn", "better": "up",
                           "trials": [{"score": 1}]}, "better")]
    for path, body, field in cases:
        status, _, text = call(server + path, "POST", body, token=TOKEN)
        answer = json.loads(text)
        assert status == 422, text
        assert field in answer["error"] and field in {p["field"] for p in answer["problems"]}
        _no_trace(text)
    status, _, text = call(server + "/api/similar", "POST", raw=b'{"k": 5,', token=TOKEN)
    assert status == 422 and json.loads(text)["kind"] == "invalid_request"
    # bad content: the library's own message, 400
    for path, body, words in [
            ("/api/similar", {"fingerprint": {"kind": "other"}}, "fingerprint"),
            ("/api/suggest", {"fingerprint": fp, "family": "boosted-rocks"}, "family"),
            ("/api/log", {"fingerprint": fp, "family": "knn",
                          "trials": [{"n_neighbors": 5, "leaf": 3, "score": 0.5}]}, "leaf"),
            ("/api/log", {"fingerprint": fp, "family": "knn",
                          "trials": [{"n_neighbors": -4, "score": 0.5}]}, "n_neighbors")]:
        status, _, text = call(server + path, "POST", body, token=TOKEN)
        assert status == 400 and words in json.loads(text)["error"], text
        _no_trace(text)
    assert dir_digest(history) == before


def test_nothing_to_suggest_and_network_errors(server, query):
    # the demo history has no svm_rbf study: the library's own error, exit 1
    with pytest.raises(NothingToSuggestError):
        Client(server).suggest(fingerprint_of=query, family="svm_rbf")
    for bad in ("", "127.0.0.1:8765", "ftp://127.0.0.1/", "http://127.0.0.1:port"):
        with pytest.raises(BadInputError):
            Client(bad)
    down = Client(f"http://127.0.0.1:{_free_port()}")
    with pytest.raises(ServiceUnavailableError) as err:
        down.info()
    assert err.value.exit_code == 1 and "connection refused" in str(err.value)


def test_read_token(locked, query):
    for path in ("/api/info", "/", "/api/map.svg"):
        status, headers, _ = call(locked + path)
        assert status == 401
    assert call(locked + "/api/info")[1]["WWW-Authenticate"].startswith("Bearer")
    assert call(locked + "/")[1]["WWW-Authenticate"].startswith("Basic")  # browsers prompt
    assert call(locked + "/health")[0] == 200
    assert call(locked + "/api/info", token="z" * 30)[0] == 401
    assert call(locked + "/api/info", token=READ_TOKEN)[0] == 200
    assert call(locked + "/api/info", token=TOKEN)[0] == 200  # writers may read
    basic = base64.b64encode(f"me:{READ_TOKEN}".encode()).decode()
    assert call(locked + "/", headers={"Authorization": f"Basic {basic}"})[0] == 200
    assert Client(locked, token=READ_TOKEN).similar(fingerprint_of=query, k=2)
    with pytest.raises(NotAuthorisedError):  # the read token does not write
        Client(locked, token=READ_TOKEN).log(fingerprint_of=query, family="knn",
                                             trials=[{"n_neighbors": 5, "score": 0.7}])


def test_serve_refuses_unsafe_tokens(tmp_path, history, server):
    runner = CliRunner()
    loose = tmp_path / "loose"
    loose.write_text(TOKEN)
    loose.chmod(0o644)
    res = runner.invoke(serve_cmd, ["--kb", str(history), "--token-file", str(loose)])
    assert res.exit_code == 2 and "chmod 600" in res.output
    short = _private_file(tmp_path / "short", "abc")
    res = runner.invoke(serve_cmd, ["--kb", str(history), "--token-file", str(short)])
    assert res.exit_code == 2 and "shorter than" in res.output
    res = runner.invoke(serve_cmd, ["--kb", str(tmp_path / "none"), "--port", "0"])
    assert res.exit_code == 2 and "not a warmstart history" in res.output
    taken = server.rsplit(":", 1)[1]  # the running server's port
    res = runner.invoke(serve_cmd, ["--kb", str(history), "--port", taken])
    assert res.exit_code == 2 and "cannot listen on 127.0.0.1:" in res.output
    # reference: common practice (loopback 127.0.0.0/8 and ::1 are this machine only)
    assert exposure_warnings("127.0.0.1", None, None) == []
    assert exposure_warnings("::1", None, None) == []
    assert exposure_warnings("localhost", None, None) == []
    assert any("without a read token" in w for w in exposure_warnings("0.0.0.0", TOKEN, None))
    assert not any("read token" in w for w in exposure_warnings("10.1.2.3", TOKEN, TOKEN))


# -- the map, the offline commands and the report -------------------------------------------------
def test_classical_mds_against_references():
    from sklearn.manifold import ClassicalMDS

    rng = np.random.default_rng(0)
    P = rng.normal(size=(12, 2)) * [3.0, 1.0]
    D = np.sqrt(((P[:, None] - P[None]) ** 2).sum(-1))
    emb = maps.classical_mds(D)
    got = np.sqrt(((emb.coords[:, None] - emb.coords[None]) ** 2).sum(-1))
    # reference: Torgerson 1952 / Gower 1966, Euclidean distances are recovered exactly
    np.testing.assert_allclose(got, D, atol=1e-9)
    ref = ClassicalMDS(n_components=2, metric="precomputed").fit(D)
    # reference: sklearn.manifold.ClassicalMDS (same eigenvalues, same axes up to sign)
    np.testing.assert_allclose(emb.values, ref.eigenvalues_, rtol=1e-9)
    np.testing.assert_allclose(np.abs(emb.coords), np.abs(ref.embedding_), atol=1e-9)
    # reference: de Silva & Tenenbaum 2004, a fitted point is placed where it was fitted;
    # a new point of the same plane lands at its true distances from the others
    np.testing.assert_allclose(emb.place(D[3][None]), emb.coords[3][None], atol=1e-9)
    new = np.array([0.7, -1.2])
    d_new = np.sqrt(((P - new) ** 2).sum(-1))
    placed = emb.place(d_new[None])[0]
    np.testing.assert_allclose(np.sqrt(((emb.coords - placed) ** 2).sum(-1)), d_new,
                               atol=1e-9)


def test_map_uses_the_distances_of_similar(query):
    kb = KnowledgeBase(DEMO)
    fps = kb.fingerprints()
    tm = maps.similarity_map(fps)["classification"]
    # reference: KnowledgeBase.similar (warmstart.similarity), the query against every one
    want = {n.dataset_id: n.distance for n in kb.similar(fingerprint_of=query, k=100)}
    np.testing.assert_allclose(tm.distances_to(query), [want[i] for i in tm.ids], rtol=1e-12)
    X = tm.landmark_rows
    first = tm.ids[0]
    near = {n.dataset_id: n.distance for n in kb.similar(fingerprint_of=fps[first], k=100)}
    np.testing.assert_allclose(maps.pairwise_distances(X[:1], X)[0],
                               [near[i] for i in tm.ids], rtol=1e-12)
    few = maps.task_map("classification", {i: fps[i] for i in tm.ids}, landmarks=6)
    assert few.landmark_rows.shape[0] == 6 and np.isfinite(few.coords).all()
    assert len(few.ids) == len(tm.ids)


def test_commands_give_the_same_json_both_ways(server, history, tmp_path):
    runner = CliRunner()
    outs = []
    for where in (["--kb", str(history)], ["--server", server]):
        res = runner.invoke(map_cmd, ["--out", str(tmp_path / "m.svg"), str(EXAMPLE),
                                      "--target", "churned", "--json", *where])
        assert res.exit_code == 0, res.output
        outs.append(json.loads(res.output))
        res = runner.invoke(report_cmd, [str(EXAMPLE), "--target", "churned", "-k", "2",
                                         "--family", "knn", "--family", "svm_rbf", "--out",
                                         str(tmp_path / "r.html"), "--json", *where])
        assert res.exit_code == 0, res.output
        outs.append({k: v for k, v in json.loads(res.output).items() if k != "bytes"})
    assert outs[0] == outs[2] and outs[1] == outs[3]
    assert "no classification study of family 'svm_rbf'" in outs[1]["families"]["svm_rbf"]


def test_map_and_report_commands(server, tmp_path):
    runner = CliRunner()
    png, svg = tmp_path / "map.png", tmp_path / "map.svg"
    res = runner.invoke(map_cmd, ["--out", str(png), "--kb", str(DEMO)])
    assert res.exit_code == 0, res.output
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"  # reference: PNG signature
    res = runner.invoke(map_cmd, ["--out", str(svg), str(EXAMPLE), "--target", "churned",
                                  "--server", server, "--json"])
    assert res.exit_code == 0, res.output
    info = json.loads(res.output)
    n = sum(info["datasets"].values())
    assert svg.read_text().count("data-dataset=") == n and 'id="query"' in svg.read_text()
    res = runner.invoke(map_cmd, ["--out", str(tmp_path / "map.gif"), "--kb", str(DEMO)])
    assert res.exit_code == 2 and res.output.startswith("error: ")
    res = runner.invoke(map_cmd, ["--out", str(svg), "--server", "http://127.0.0.1:1"])
    assert res.exit_code == 1 and res.output.count("\n") == 1
    res = runner.invoke(map_cmd, ["--out", str(svg), "--server", "nowhere"])
    assert res.exit_code == 2 and res.output.startswith("error: bad server URL")
    out = tmp_path / "report.html"
    res = runner.invoke(report_cmd, [str(EXAMPLE), "--target", "churned", "--out", str(out),
                                     "--kb", str(DEMO), "-k", "3", "--json"])
    assert res.exit_code == 0, res.output
    html = out.read_text()
    near = KnowledgeBase(DEMO).similar(EXAMPLE, target="churned", k=3)
    assert all(n.name in html for n in near)
    assert html.count("data-dataset=") == 31 and 'id="query"' in html
    assert "hist_gradient_boosting" in json.loads(res.output)["families"]
    assert "learning_rate=" in html  # the suggestions are in it
    # self-contained: nothing to fetch (the SVG namespace URIs are names, not fetched)
    for needle in ("<script", "<link", "src=", "url(http", 'href="http', "@import"):
        assert needle not in html, needle


# -- the web view in a real browser ---------------------------------------------------------------
def _chromium(tmp: Path, *args: str) -> str:
    cmd = [CHROMIUM, "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic",
           "--no-first-run", "--disable-background-networking", "--disable-component-update",
           "--disable-sync", f"--user-data-dir={tmp / 'profile'}", *args]
    done = subprocess.run(cmd, capture_output=True, text=True, timeout=90)
    return done.stdout


@pytest.mark.skipif(CHROMIUM is None, reason="chromium is not installed "
                    "(apt-get install -y chromium); the browser check needs it")
def test_web_view_in_chromium(server, history, tmp_path):
    n = KnowledgeBase(history).info()["datasets"]
    dom = _chromium(tmp_path, "--dump-dom", server + "/")
    assert dom.count("data-dataset=") == n  # one point per dataset, in the rendered DOM
    assert dom.count('data-task="classification"') + dom.count('data-task="regression"') == n
    ARTIFACTS.mkdir(exist_ok=True)
    shot = ARTIFACTS / "service_map.png"
    shot.unlink(missing_ok=True)
    _chromium(tmp_path, "--window-size=1280,1100", f"--screenshot={shot}", server + "/")
    assert shot.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n" and shot.stat().st_size > 20_000
    first = json.loads(call(server + "/api/datasets")[2])[0]
    page = _chromium(tmp_path, "--dump-dom", server + f"/datasets/{first['dataset_id']}")
    assert f"<h1>{first['name']}</h1>" in page and "Nearest datasets" in page
    assert page.count("data-dataset=") == n
