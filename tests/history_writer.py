"""A writer process for the history's concurrency and crash tests (run as a script).

``python history_writer.py write KB FINGERPRINT TAG N``
    Log N small studies labelled ``TAG-<i>`` through the Python API, then exit.
``python history_writer.py fork-write KB FINGERPRINT PROCS N``
    Fork PROCS writer processes (tags ``w0``, ``w1``...) that each log N studies at the
    same time; exit 1 if any of them failed. Forking after one import keeps the
    start-up cost (importing scikit-learn) out of the measurement.
``python history_writer.py kill KB FINGERPRINT ROUNDS SEED``
    Fork a writer that logs studies in a loop, SIGKILL it, ROUNDS times. The first
    rounds pause inside each write step (``WARMSTART_TEST_PAUSE_AT``) so the kill lands
    there; the rest kill at random times spread over a few measured write durations.
    Forking from this already-imported process keeps each round cheap. Only file
    listings are used here between kills (no Parquet reads), so the forked children
    start with a clean Arrow thread pool. Prints one JSON line per round.

``python history_writer.py delete KB FINGERPRINT IDS_FILE``
    Delete the studies listed in IDS_FILE (``kb delete``), appending each id to
    ``KB.deleted`` once its tombstone is written.
``python history_writer.py compact KB FINGERPRINT ROUNDS``
    Compact the history ROUNDS times in a row.

Every child appends the id of each study whose ``log`` returned to ``KB.committed``.
"""

from __future__ import annotations

import json
import os
import random
import signal
import sys
import time
import traceback
import zlib
from pathlib import Path

from warmstart.fingerprint import Fingerprint
from warmstart.history import KnowledgeBase
from warmstart.storage import PAUSE_ENV, PAUSE_SECONDS_ENV, PAUSE_STEPS, TEMP_PREFIX


def trials(tag: str, i: int) -> list[dict]:
    # Small, distinct per study (writer tag and number), so a mixed-up trial would be
    # noticed and no study is refused as already logged.
    shift = (zlib.crc32(tag.encode()) % 997) * 1e-7
    return [{"n_estimators": 10 + i + j, "max_depth": 2 + j, "score": 0.5 + 0.001 * j + shift}
            for j in range(3)]


def log_loop(kb: KnowledgeBase, fp: Fingerprint, tag: str, n: int | None) -> None:
    record = kb.path.parent / f"{kb.path.name}.committed"
    i = 0
    while n is None or i < n:
        s = kb.log(fingerprint_of=fp, family="random_forest", trials=trials(tag, i),
                   name=f"{tag}-{i}")
        with open(record, "a") as fh:
            fh.write(s.study_id + "\n")
        i += 1


def leftovers(root: Path) -> set[str]:
    """Temporary files, and log files in datasets/ or trials/ with no study file."""
    out = set()
    studies = set(os.listdir(root / "studies"))
    for table in ("datasets", "trials", "studies"):
        for name in os.listdir(root / table):
            if name.startswith(TEMP_PREFIX) or (table != "studies" and name not in studies):
                out.add(f"{table}/{name}")
    return out


def fork_writer(kb: KnowledgeBase, fp: Fingerprint, tag: str, env: dict[str, str],
                n: int | None) -> int:
    pid = os.fork()
    if pid == 0:  # child
        code = 1
        try:
            os.environ.update(env)
            log_loop(kb, fp, tag, n)
            code = 0
        except BaseException:
            traceback.print_exc()
        finally:
            os._exit(code)
    return pid


def fork_write(kb: KnowledgeBase, fp: Fingerprint, procs: int, n: int) -> int:
    pids = [fork_writer(kb, fp, f"w{p}", {}, n) for p in range(procs)]
    codes = [os.waitpid(pid, 0)[1] for pid in pids]
    return int(any(codes))


def kill_rounds(kb: KnowledgeBase, fp: Fingerprint, rounds: int, seed: int) -> None:
    rng = random.Random(seed)
    t0 = time.perf_counter()
    pid = fork_writer(kb, fp, "measure", {}, 5)
    os.waitpid(pid, 0)
    per_write = (time.perf_counter() - t0) / 5
    print(json.dumps({"measured_write_seconds": per_write}), flush=True)
    pause = max(1.0, 10 * per_write)
    for r in range(rounds):
        before = leftovers(kb.path)
        if r < 2 * len(PAUSE_STEPS):
            step = PAUSE_STEPS[r % len(PAUSE_STEPS)]
            env = {PAUSE_ENV: step, PAUSE_SECONDS_ENV: str(pause)}
            delay = 2 * per_write + 0.2 * pause  # inside the first pause at that step
        else:
            step, env = "random", {}
            delay = rng.uniform(0.0, 3 * per_write)
        pid = fork_writer(kb, fp, f"k{r}", env, None)
        time.sleep(delay)
        os.kill(pid, signal.SIGKILL)
        _, status = os.waitpid(pid, 0)
        new = sorted(leftovers(kb.path) - before)
        print(json.dumps({"round": r, "step": step, "delay": delay,
                          "killed": os.WIFSIGNALED(status), "mid_write": bool(new),
                          "leftovers": new}), flush=True)


def delete_all(kb: KnowledgeBase, ids_file: str) -> None:
    """Delete the studies listed in ``ids_file``, recording each one deleted."""
    record = kb.path.parent / f"{kb.path.name}.deleted"
    for sid in Path(ids_file).read_text().split():
        kb.delete(sid)
        with open(record, "a") as fh:
            fh.write(sid + "\n")


def compact_loop(kb: KnowledgeBase, rounds: int) -> None:
    for _ in range(rounds):
        kb.compact()


def warm_imports(fp: Fingerprint) -> None:
    """Check one study's trials in this process, writing nothing, so that the modules a
    log imports lazily (the estimator's for its parameter checks) are loaded before any
    fork: a killed child then dies inside the write, not inside an import."""
    from warmstart.families import get_family
    from warmstart.metrics import DEFAULT_METRIC, resolve_metric
    from warmstart.trials import check_trials

    check_trials(trials("warm-up", 0), get_family("random_forest"), fp.task,
                 resolve_metric(DEFAULT_METRIC[fp.task], None))


def main(argv: list[str]) -> None:
    mode, kb_path, fp_path = argv[:3]
    kb = KnowledgeBase(kb_path)
    fp = Fingerprint.from_json_file(fp_path)
    warm_imports(fp)
    if mode == "write":
        log_loop(kb, fp, argv[3], int(argv[4]))
    elif mode == "fork-write":
        sys.exit(fork_write(kb, fp, int(argv[3]), int(argv[4])))
    elif mode == "kill":
        kill_rounds(kb, fp, int(argv[3]), int(argv[4]))
    elif mode == "delete":
        delete_all(kb, argv[3])
    elif mode == "compact":
        compact_loop(kb, int(argv[3]))
    else:
        raise SystemExit(f"unknown mode {mode}")


if __name__ == "__main__":
    main(sys.argv[1:])
