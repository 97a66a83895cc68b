"""``tune`` with its cross-validation fits on a real dask LocalCluster of 2 worker
processes: the same trials and scores as in one process, a worker SIGKILLed mid-trial
(retried, or the trial recorded as failed; never dropped), and the command lines
``fingerprint DIR --cluster local:2`` and ``tune --cluster local:2``."""

from __future__ import annotations

import json
import os

import pytest
from click.testing import CliRunner
from sklearn.datasets import load_iris

pytest.importorskip("distributed")

from cli.main import main  # noqa: E402
from tests.test_cluster import _in_thread, _kill_a_busy_worker, worker_env  # noqa: E402
from tests.test_partitioned import TARGET, write_partitioned  # noqa: E402
from warmstart import cluster as wcluster  # noqa: E402
from warmstart.trials import FAILED, OK  # noqa: E402
from warmstart.tune import tune  # noqa: E402

FIT_SLEEP = 1.5  # seconds each fold task sleeps in the kill tests


@pytest.fixture(scope="module")
def client():
    with wcluster.connect("local:2") as c:
        yield c


@pytest.fixture
def iris():
    # reference: scikit-learn's bundled iris (150 rows, 3 balanced classes)
    return load_iris(as_frame=True).frame


@pytest.fixture
def slow_fits(client):
    with worker_env(client, wcluster.FIT_SLEEP_ENV, str(FIT_SLEEP)):
        yield


def _summary(result):
    return [(t.index, t.origin, t.config, t.status, t.score, t.fold_scores, t.error)
            for t in result.trials]


@pytest.mark.parametrize("family, search", [("random_forest", "gp-ei"), ("knn", "random")])
def test_cluster_trials_equal_the_one_process_trials(client, iris, family, search):
    # reference: sklearn.model_selection.cross_validate (the one-process path) -- the
    # cluster path fits each fold itself and must reproduce its scores exactly
    kw = dict(target="target", family=family, budget=4, cv=3, seed=7, search=search,
              log=False)
    alone = tune(iris, **kw)
    spread = tune(iris, cluster=client, **kw)
    assert _summary(spread) == _summary(alone)
    assert spread.n_ok == 4 and len({json.dumps(t.config) for t in spread.trials}) == 4


def _kill_a_fitting_worker(client) -> int:
    return _kill_a_busy_worker(client, "warmstart-fold-", FIT_SLEEP)


def test_a_worker_killed_mid_trial_is_retried(client, iris, slow_fits):
    kw = dict(target="target", family="knn", budget=2, cv=2, seed=3, search="random",
              log=False)
    alone = tune(iris, **kw)
    t, out = _in_thread(lambda: tune(iris, cluster=client, **kw))
    victim = _kill_a_fitting_worker(client)
    t.join(90)
    assert "error" not in out, out.get("error")
    assert _summary(out["value"]) == _summary(alone)  # the lost fold ran again elsewhere
    client.wait_for_workers(2, timeout=30)
    assert victim not in client.run(os.getpid).values()


def test_without_retries_the_trial_is_recorded_as_failed(client, iris, slow_fits):
    scheduler = client.cluster.scheduler
    before = scheduler.allowed_failures
    scheduler.allowed_failures = 0  # dask gives up on the first lost worker
    try:
        t, out = _in_thread(lambda: tune(iris, target="target", family="knn", budget=2,
                                         cv=2, seed=3, search="random", log=False,
                                         cluster=client))
        _kill_a_fitting_worker(client)
        t.join(90)
    finally:
        scheduler.allowed_failures = before
    assert "error" not in out, out.get("error")
    trials = out["value"].trials
    assert len(trials) == 2  # the study went on: nothing dropped
    failed = [tr for tr in trials if tr.status == FAILED]
    assert len(failed) >= 1 and failed[0].score is None
    assert failed[0].error.startswith("ClusterError: dask workers kept dying while fitting")
    assert all(tr.status == OK for tr in trials if tr not in failed)


def run(*args):
    return CliRunner().invoke(main, [str(a) for a in args])


def test_fingerprint_command_gives_the_same_json_on_local_2(tmp_path):
    data = write_partitioned(tmp_path / "sales", n=3000, seed=2)
    alone = run("fingerprint", data, "--target", TARGET, "--json")
    spread = run("fingerprint", data, "--target", TARGET, "--json", "--cluster", "local:2")
    assert alone.exit_code == 0 and spread.exit_code == 0, spread.output + spread.stderr
    assert json.loads(spread.stdout) == json.loads(alone.stdout)
    assert json.loads(alone.stdout)["meta_features"]["rows"] == 3000


def test_tune_command_on_local_2_logs_a_study(kb, iris_csv):
    r = run("tune", iris_csv, "-t", "target", "-f", "knn", "-n", 3, "--cv", 3,
            "--kb", kb.path, "--cluster", "local:2", "--json")
    assert r.exit_code == 0, r.output + r.stderr
    doc = json.loads(r.stdout)
    studies = kb.tables()["studies"]
    assert len(studies) == 1 and studies["study_id"].iloc[0] == doc["logged"]["study_id"]
    assert len(kb.tables()["trials"]) == 3 == len(doc["trials"])


def test_a_bad_cluster_argument_is_one_line_exit_2(iris_csv):
    r = run("tune", iris_csv, "-t", "target", "-f", "knn", "-n", 2, "--no-log",
            "--cluster", "local:zero")
    assert r.exit_code == 2 and r.stderr.count("\n") == 1
    assert r.stderr.startswith("error: cluster 'local:zero'")


def test_tune_of_a_directory_records_the_dataset_log_records(kb, tmp_path):
    # the study's dataset id is the directory's fingerprint hash, as 'log DIR' computes it
    data = write_partitioned(tmp_path / "sales", n=600, seed=5)
    res = tune(data, target=TARGET, family="linear", budget=2, cv=2, kb=kb)
    again = kb.log(data, target=TARGET, family="linear",
                   trials=[{**res.trials[0].config, "score": 0.5}])
    assert again.dataset_id == res.logged.dataset_id and not again.dataset_is_new


def test_log_similar_suggest_fingerprint_a_directory_on_the_cluster(client, kb, tmp_path):
    # the cluster's fingerprint is the one-process one, so each command answers the same
    data = write_partitioned(tmp_path / "sales", n=2000, seed=8)
    trials = [{"n_neighbors": k, "score": s} for k, s in ((3, 0.61), (9, 0.66))]
    spread = kb.log(data, target=TARGET, family="knn", trials=trials, cluster=client)
    again = kb.log(data, target=TARGET, family="knn", trials=trials)
    assert again.dataset_id == spread.dataset_id and not again.dataset_is_new
    near = [n.to_dict() for n in kb.similar(data, target=TARGET, cluster=client)]
    assert near == [n.to_dict() for n in kb.similar(data, target=TARGET)]
    kw = dict(target=TARGET, family="knn", k=2)
    assert [s.to_dict() for s in kb.suggest(data, cluster=client, **kw)] == \
        [s.to_dict() for s in kb.suggest(data, **kw)]
    r = run("similar", data, "--target", TARGET, "--kb", kb.path, "--json",
            "--cluster", "local:2")
    assert r.exit_code == 0, r.output + r.stderr
    assert json.loads(r.stdout) == json.loads(json.dumps(near))
