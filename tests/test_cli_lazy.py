"""Start-up cost: which heavy libraries each quick command loads, and the lazy command list.

Each check runs the real entry point in a fresh interpreter (``python -c``) and reads
``sys.modules`` after the command returned, so an import added at the top of a module on
the path of ``--help`` or ``families`` fails here. Wall time is measured by
``benchmarks/startup.py``, not here.
"""

from __future__ import annotations

import importlib
import json
import subprocess
import sys

import pytest

from cli.main import COMMANDS, main

PROBE = """
import json, sys
from cli.main import main
sys.argv = ["warmstart", *json.loads(sys.argv[1])]
try:
    main()
except SystemExit as exc:
    code = exc.code
else:
    code = 0
heavy = ("numpy", "pandas", "pyarrow", "scipy", "sklearn")
print(json.dumps({"code": code, "loaded": sorted(m for m in heavy if m in sys.modules)}),
      file=sys.stderr)
"""


def _run(*args: str, env_kb: str | None = None) -> dict:
    out = subprocess.run([sys.executable, "-c", PROBE, json.dumps(list(args))],
                         capture_output=True, text=True, timeout=300,
                         env=None if env_kb is None else {"WARMSTART_KB": env_kb,
                                                          "PATH": "/usr/bin:/bin"})
    return json.loads(out.stderr.strip().splitlines()[-1])


def test_help_loads_none_of_the_numeric_libraries():
    got = _run("--help")
    assert got == {"code": 0, "loaded": []}


def test_version_loads_none_of_the_numeric_libraries():
    assert _run("--version") == {"code": 0, "loaded": []}


def test_families_json_loads_no_pandas_scipy_or_scikit_learn():
    got = _run("families", "--json")
    assert got["code"] == 0
    assert not {"pandas", "scipy", "sklearn"} & set(got["loaded"])


@pytest.mark.parametrize("args", [("suggest",), ("log", "x.csv"), ("backtest",),
                                  ("tune",), ("similar", "--k", "0")])
def test_argument_errors_load_no_scipy_or_scikit_learn(args):
    got = _run(*args)
    assert got["code"] == 2  # click's usage error
    assert not {"scipy", "sklearn"} & set(got["loaded"])


def test_kb_info_loads_no_scipy_or_scikit_learn(tmp_path):
    from warmstart.history import KnowledgeBase

    KnowledgeBase.init(tmp_path / "kb")
    got = _run("kb", "info", "--kb", str(tmp_path / "kb"))
    assert got["code"] == 0
    assert not {"scipy", "sklearn"} & set(got["loaded"])


def test_each_listed_summary_is_its_commands_first_help_line():
    for name, (module, attribute, summary) in COMMANDS.items():
        command = getattr(importlib.import_module(module), attribute)
        assert command.get_short_help_str(limit=10_000) == summary, name
        assert command.name == name


def test_every_command_is_listed_and_resolves():
    import click

    ctx = click.Context(main)
    assert main.list_commands(ctx) == sorted(COMMANDS)
    for name in COMMANDS:
        assert isinstance(main.get_command(ctx, name), click.Command)
    assert main.get_command(ctx, "no-such-command") is None
