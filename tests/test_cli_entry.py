"""The command line's entry points and module layout.

``python -m cli.main`` once lost every command kept outside ``cli/main.py`` ("No such
command 'kb'"): the module ran as ``__main__`` while the command modules registered
themselves on a second copy imported as ``cli.main``. These tests run the real entry
points in subprocesses and check the layout that prevents it.
"""

from __future__ import annotations

import ast
import os
import subprocess
import sys
from importlib.metadata import entry_points
from pathlib import Path

import pandas as pd
import pytest
from click.testing import CliRunner

from cli.main import main

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "knowledge_base"
CLI_DIR = ROOT / "cli"


def _run(args: list[str]) -> subprocess.CompletedProcess:
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    env.pop("WARMSTART_KB", None)
    return subprocess.run([sys.executable, *args], cwd=ROOT, env=env, capture_output=True,
                          text=True, timeout=300)


def _counts_line(text: str) -> str:
    return text.splitlines()[0].split(": ", 1)[1]


def test_kb_info_through_click_counts_what_is_on_disk():
    r = CliRunner().invoke(main, ["kb", "info", "--kb", str(DEMO)])
    assert r.exit_code == 0, r.output
    # reference: pandas.read_parquet of the demo history's tables, counted directly
    datasets = pd.read_parquet(DEMO / "datasets")["dataset_id"].nunique()
    studies = pd.read_parquet(DEMO / "studies")["study_id"].nunique()
    trials = len(pd.read_parquet(DEMO / "trials")[["study_id", "trial_index"]]
                 .drop_duplicates())
    assert _counts_line(r.stdout).startswith(
        f"{datasets} datasets, {studies} studies, {trials} trials, ")


def test_python_m_cli_main_runs_subcommands_kept_in_other_modules():
    r = _run(["-m", "cli.main", "kb", "info", "--kb", str(DEMO)])
    assert r.returncode == 0, r.stderr
    assert "No such command" not in r.stderr
    assert r.stdout == CliRunner().invoke(main, ["kb", "info", "--kb", str(DEMO)]).stdout
    helped = _run(["-m", "cli.main", "--help"])
    listed = {ln.split()[0] for ln in helped.stdout.split("Commands:")[1].splitlines()
              if ln.strip()}
    # reference: the commands the README's tour documents
    assert listed == {"backtest", "families", "fingerprint", "kb", "log", "similar",
                      "suggest", "tune"}


def test_the_warmstart_script_entry_point_runs_kb_info():
    (ep,) = entry_points(group="console_scripts", name="warmstart")
    assert ep.value == "cli.main:main"  # reference: pyproject.toml [project.scripts]
    code = ("import sys; from importlib.metadata import entry_points; "
            "(ep,) = entry_points(group='console_scripts', name='warmstart'); "
            "sys.argv[0] = 'warmstart'; sys.exit(ep.load()())")
    r = _run(["-c", code, "kb", "info", "--kb", str(DEMO)])
    assert r.returncode == 0, r.stderr
    assert r.stdout.startswith(f"history {DEMO} (format version ")


def _cli_imports() -> dict[str, set[str]]:
    """Module -> the cli modules it imports, read from the source."""
    graph = {}
    for path in sorted(CLI_DIR.glob("*.py")):
        tree = ast.parse(path.read_text())
        found = set()
        for node in ast.walk(tree):
            if isinstance(node, ast.ImportFrom) and node.module:
                names = [node.module] + [f"{node.module}.{a.name}" for a in node.names]
            elif isinstance(node, ast.Import):
                names = [a.name for a in node.names]
            else:
                continue
            found |= {n for n in names if n.startswith("cli.") and
                      (CLI_DIR / f"{n.split('.')[1]}.py").exists() and n.count(".") == 1}
        graph[f"cli.{path.stem}"] = found
    return graph


def test_no_cli_module_imports_the_entry_point_and_there_is_no_cycle():
    graph = _cli_imports()
    assert graph["cli.main"], "cli.main assembles the commands from their modules"
    importers = [m for m, deps in graph.items() if "cli.main" in deps]
    assert importers == []
    # reference: common practice, depth-first search for a back edge
    state: dict[str, int] = {}

    def visit(m: str, trail: list[str]) -> None:
        state[m] = 1
        for d in graph.get(m, ()):
            if state.get(d) == 1:
                pytest.fail(f"import cycle: {' -> '.join(trail + [m, d])}")
            if d not in state:
                visit(d, trail + [m])
        state[m] = 2

    for m in graph:
        if m not in state:
            visit(m, [])
