"""Load on the HTTP service, and the time to draw the similarity map of a large history.

Part 1 (load). A real ``warmstart serve`` (uvicorn, one process) on a free loopback port
over a temporary copy of the demo history; 8 concurrent clients send 2,000 requests in a
seeded mix: 35 % suggest (for the four families the demo has studies of), 35 % similar,
30 % log (5 seeded random trials of extra trees, a family no suggest asks about, so
suggest keeps answering about the demo's families instead of fitting surrogates for 600
new studies). Printed: p50 / p99 latency per kind and overall, throughput, and, as the
baseline, the same kinds of question asked of the directory in-process, one at a time,
with the ratio. Afterwards ``kb check`` runs on the history and the counts are compared
with what the clients were told: every logged study id is in the history exactly once,
and the studies and trials grew by exactly what was logged.

Part 2 (map). 10,000 synthetic fingerprints (the demo's, each perturbed by seeded
log-normal noise), laid out by landmark classical MDS and drawn as SVG and PNG; the
baseline is full classical MDS (every pairwise distance, a full eigendecomposition) at
2,000 fingerprints, beside landmark MDS at the same size.

    nice -n 10 python benchmarks/service_load.py [--requests 2000] [--clients 8]
"""

from __future__ import annotations

import argparse
import os
import shutil
import socket
import subprocess
import sys
import tempfile
import threading
import time
import urllib.request
from collections import Counter
from dataclasses import replace
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from warmstart import KnowledgeBase, fingerprint  # noqa: E402
from warmstart.families import get_family  # noqa: E402
from warmstart.service import Client, maps  # noqa: E402

EXAMPLE = ROOT / "examples" / "quillmarsh_loyalty_churn.csv"
FAMILIES = ["hist_gradient_boosting", "random_forest", "knn", "linear"]
TOKEN = "bench-token-" + "9f8e7d6c" * 3
MIX = {"suggest": 0.35, "similar": 0.35, "log": 0.30}
LOG_FAMILY = "extra_trees"
TRIALS_PER_LOG = 5


def start_server(history: Path, tmp: Path) -> tuple[str, subprocess.Popen]:
    token_file = tmp / "token"
    token_file.write_text(TOKEN)
    token_file.chmod(0o600)
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        port = s.getsockname()[1]
    env = {k: v for k, v in os.environ.items() if not k.startswith("WARMSTART_")}
    proc = subprocess.Popen([sys.executable, "-m", "cli.serve", "--kb", str(history),
                             "--port", str(port), "--token-file", str(token_file)],
                            cwd=ROOT, env=env)
    url = f"http://127.0.0.1:{port}"
    for _ in range(200):
        try:
            with urllib.request.urlopen(url + "/health", timeout=2):
                return url, proc
        except OSError:
            time.sleep(0.2)
    proc.kill()
    raise SystemExit("the server did not start")


def plan(n: int, seed: int) -> list[tuple[str, int]]:
    """The seeded request mix: (kind, variant) pairs."""
    rng = np.random.default_rng(seed)
    kinds = rng.choice(list(MIX), size=n, p=list(MIX.values()))
    return [(str(k), int(v)) for k, v in zip(kinds, rng.integers(0, 1 << 30, n))]


def ask(history, kind: str, variant: int, queries, trials):
    """One request of ``kind`` to ``history`` (a Client or a KnowledgeBase)."""
    q = queries[variant % len(queries)]
    if kind == "suggest":
        return history.suggest(fingerprint_of=q, family=FAMILIES[variant % len(FAMILIES)], k=5)
    if kind == "similar":
        return history.similar(fingerprint_of=q, k=5)
    rng = np.random.default_rng(variant)
    rows = [{**trials.sample(rng), "score": float(rng.uniform(0.5, 0.9))}
            for _ in range(TRIALS_PER_LOG)]
    return history.log(fingerprint_of=q, family=LOG_FAMILY, trials=rows,
                       name=f"load-{variant}")


def run_load(url: str, jobs, clients: int, queries, trials):
    latencies: dict[str, list[float]] = {k: [] for k in MIX}
    logged, errors = [], Counter()
    lock, cursor = threading.Lock(), iter(jobs)

    def worker():
        client = Client(url, token=TOKEN)
        while True:
            with lock:
                job = next(cursor, None)
            if job is None:
                return
            t0 = time.perf_counter()
            try:
                out = ask(client, *job, queries, trials)
            except Exception as exc:  # counted, never hidden
                with lock:
                    errors[f"{job[0]}: {type(exc).__name__}: {exc}"] += 1
                continue
            dt = time.perf_counter() - t0
            with lock:
                latencies[job[0]].append(dt)
                if job[0] == "log":
                    logged.append(out)

    threads = [threading.Thread(target=worker) for _ in range(clients)]
    t0 = time.perf_counter()
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    return latencies, logged, errors, time.perf_counter() - t0


def pct(values, q) -> float:
    return float(np.percentile(values, q)) * 1000 if values else float("nan")


def load_part(args) -> int:
    query = fingerprint(EXAMPLE, target="churned")
    # four "datasets" with the example's meta-features and their own content hashes
    queries = [replace(query, dataset_hash=f"{i:02x}" * 32) for i in range(1, 5)]
    trials = get_family(LOG_FAMILY).space(query.task)  # what the logged trials draw from
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        history, base = tmp / "kb", tmp / "baseline"
        shutil.copytree(ROOT / "knowledge_base", history)
        shutil.copytree(ROOT / "knowledge_base", base)
        before = KnowledgeBase(history).info()
        url, proc = start_server(history, tmp)
        try:
            jobs = plan(args.requests, args.seed)
            lat, logged, errors, wall = run_load(url, jobs, args.clients, queries, trials)
        finally:
            proc.terminate()
            proc.wait(timeout=20)
        direct = baseline(base, jobs[:args.baseline], queries, trials)
        report_latency(lat, direct, wall, args)
        return report_integrity(history, before, logged, errors, TRIALS_PER_LOG)


def baseline(path: Path, jobs, queries, trials) -> dict[str, list[float]]:
    kb = KnowledgeBase(path)
    out: dict[str, list[float]] = {k: [] for k in MIX}
    for kind, variant in jobs:
        t0 = time.perf_counter()
        ask(kb, kind, variant, queries, trials)
        out[kind].append(time.perf_counter() - t0)
    return out


def report_latency(lat, direct, wall, args) -> None:
    done = sum(len(v) for v in lat.values())
    print(f"load: {args.clients} clients, {args.requests} requests on loopback, "
          f"{done} answered in {wall:.1f} s = {done / wall:.1f} requests/s")
    print(f"{'kind':8} {'n':>5} {'p50 ms':>8} {'p99 ms':>8}   {'direct p50':>10} "
          f"{'direct p99':>10}  {'p50 ratio':>9}")
    for kind in list(MIX) + ["all"]:
        got = sum(lat.values(), []) if kind == "all" else lat[kind]
        ref = sum(direct.values(), []) if kind == "all" else direct[kind]
        ratio = pct(got, 50) / pct(ref, 50) if ref else float("nan")
        print(f"{kind:8} {len(got):5d} {pct(got, 50):8.1f} {pct(got, 99):8.1f}   "
              f"{pct(ref, 50):10.1f} {pct(ref, 99):10.1f}  {ratio:9.2f}")
    print(f"(direct: the first {args.baseline} requests of the same mix asked of the "
          "directory in-process, one at a time; the served ones queue behind 8 clients "
          "on 2 shared cores)")


def report_integrity(history: Path, before, logged, errors, n_trials: int) -> int:
    check = subprocess.run([sys.executable, "-c", "from cli.main import main; main()", "kb",
                            "check", "--kb", str(history)], cwd=ROOT, capture_output=True,
                           text=True)
    kb = KnowledgeBase(history)
    after = kb.info()
    studies = kb.tables()["studies"]
    ids = Counter(studies["study_id"])
    lost = sum(1 for s in logged if ids.get(s.study_id, 0) == 0)
    dup = sum(1 for s in logged if ids.get(s.study_id, 0) > 1) + (len(studies) - len(ids))
    grew_studies = after["studies"] - before["studies"]
    grew_trials = after["trials"] - before["trials"]
    print(f"kb check: exit {check.returncode}; "
          f"{check.stdout.strip().splitlines()[-1] if check.stdout.strip() else ''}")
    print(f"writes: {len(logged)} logs acknowledged; studies +{grew_studies}, trials "
          f"+{grew_trials} (expected +{len(logged)}, +{len(logged) * n_trials}); "
          f"lost {lost}, duplicated {dup}; failed requests {sum(errors.values())}")
    for what, n in errors.most_common(5):
        print(f"  error x{n}: {what}")
    ok = (check.returncode == 0 and lost == 0 and dup == 0 and not errors
          and grew_studies == len(logged) and grew_trials == len(logged) * n_trials)
    print("integrity:", "ok" if ok else "PROBLEM")
    return 0 if ok else 1


# -- part 2: the map of a large history --------------------------------------------------------
def synthetic(n: int, seed: int) -> dict:
    """``n`` fingerprints: the demo's, each value scaled by seeded log-normal noise."""
    base = list(KnowledgeBase(ROOT / "knowledge_base").fingerprints().values())
    rng = np.random.default_rng(seed)
    out = {}
    for i in range(n):
        fp = base[i % len(base)]
        noise = rng.lognormal(0.0, 0.25, len(fp.values))
        values = {k: v * f for (k, v), f in zip(fp.values.items(), noise)}
        out[f"synthetic-{i:05d}"] = replace(fp, values=values)
    return out


def timed(fn):
    t0 = time.perf_counter()
    value = fn()
    return value, time.perf_counter() - t0


def map_part(args) -> None:
    fps = synthetic(args.map_size, args.seed)
    names = {i: i for i in fps}
    layout, t_layout = timed(lambda: maps.similarity_map(fps))
    svg, t_svg = timed(lambda: maps.map_svg(layout, names))
    with tempfile.TemporaryDirectory() as tmp:
        def png():
            fig = maps.draw(layout, names)
            fig.savefig(Path(tmp) / "map.png", dpi=130)
            maps._pyplot().close(fig)

        _, t_png = timed(png)
    print(f"map of {args.map_size} synthetic fingerprints: layout (landmark MDS, "
          f"{maps.LANDMARKS} landmarks per task) {t_layout:.2f} s; SVG {t_svg:.2f} s "
          f"({len(svg) / 1e6:.1f} MB, {svg.count('data-dataset=')} points); PNG {t_png:.2f} s")
    small = dict(list(fps.items())[:args.full_size])
    _, t_land = timed(lambda: maps.similarity_map(small))
    _, t_full = timed(lambda: maps.similarity_map(small, landmarks=args.full_size))
    print(f"baseline at {args.full_size}: full classical MDS {t_full:.2f} s vs landmark "
          f"{t_land:.2f} s (ratio {t_full / t_land:.1f})")


def main() -> int:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--requests", type=int, default=2000)
    p.add_argument("--clients", type=int, default=8)
    p.add_argument("--baseline", type=int, default=200,
                   help="requests of the mix asked of the directory directly")
    p.add_argument("--map-size", type=int, default=10_000)
    p.add_argument("--full-size", type=int, default=2000)
    p.add_argument("--seed", type=int, default=0)
    p.add_argument("--only", choices=["load", "map"], default=None)
    args = p.parse_args()
    code = 0
    if args.only in (None, "load"):
        code = load_part(args)
    if args.only in (None, "map"):
        map_part(args)
    return code


if __name__ == "__main__":
    sys.exit(main())
