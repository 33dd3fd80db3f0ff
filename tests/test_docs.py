"""Every code block of README.md and docs/*.md runs, or is checked as far as this machine allows.

How each fenced block is checked:

* ``python`` blocks run, as written, in a fresh process in a temporary folder that holds the bundled demo
  table (``demo/greenhouse.csv``) and, for the overnight-jobs guide, a small invented greenhouse table
  ``bays.csv`` with the job file ``selectkit job new`` writes for it (``bays.toml``).  A block that names a
  placeholder host (``scheduler.example``) cannot reach it from a test: it is compiled, and each call of a
  selectkit function in it is bound to the function's signature (the keywords exist).
* ``toml`` blocks are read by the job-file parser (every key and value checked; the table need not exist).
* shell blocks (``bash`` or unlabelled): every ``selectkit ...`` command line is parsed by the command
  line's own parser (an unknown or misspelt option fails), and the fast ones (``selectkit forms``) run.
  Lines of sample output (``selectkit: error: ...``, status screens) are not commands and are skipped.
"""

from __future__ import annotations

import ast
import inspect
import os
import re
import shlex
import shutil
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from selectkit.cli import build_parser

ROOT = Path(__file__).resolve().parents[1]
DOCUMENTS = [ROOT / "README.md", *sorted((ROOT / "docs").glob("*.md"))]
_FENCE = re.compile(r"^```([A-Za-z0-9_+-]*)[^\n]*\n(.*?)^```", re.M | re.S)
#: Hosts that stand for "your own" in the documents: a block naming one is checked, not run.
_PLACEHOLDER_HOSTS = ("scheduler.example",)
#: Commands fast enough to run here (the others are parsed: a search of the demo runs in the demo's own test).
_RUN_COMMANDS = ("forms",)


def _blocks():
    for path in DOCUMENTS:
        text = path.read_text(encoding="utf-8")
        for match in _FENCE.finditer(text):
            line = text.count("\n", 0, match.start()) + 1
            yield pytest.param(path, match.group(1).lower(), match.group(2), id=f"{path.name}:{line}")


BLOCKS = list(_blocks())


def _bays_table(path: Path) -> None:
    """An invented greenhouse table: yield of 40 bays from light and plant density, a cultivar, a noise probe."""
    rng = np.random.default_rng(11)
    n = 40
    light = rng.uniform(8.0, 30.0, n)
    density = rng.uniform(1.5, 4.5, n)
    cultivar = rng.choice(["Ruby", "Amber"], n)
    frame = pd.DataFrame({
        "yield_kg_m2": np.round(5 + 5 * np.log(light) - 8 / density + 1.2 * (cultivar == "Amber")
                                + rng.normal(0, 0.6, n), 3),
        "light_mol_m2_day": np.round(light, 3), "plant_density_m2": np.round(density, 3),
        "cultivar": cultivar, "probe": np.round(rng.normal(50, 10, n), 2),
    })
    frame.to_csv(path, index=False)


@pytest.fixture
def workspace(tmp_path):
    (tmp_path / "demo").mkdir()
    shutil.copy(ROOT / "demo" / "greenhouse.csv", tmp_path / "demo" / "greenhouse.csv")
    _bays_table(tmp_path / "bays.csv")
    from selectkit.jobs import starter_job

    text = starter_job(tmp_path / "bays.csv", response="yield_kg_m2", job_file=tmp_path / "bays.toml")
    (tmp_path / "bays.toml").write_text(text.replace('methods = ["auto"]', 'methods = ["exhaustive"]'),
                                        encoding="utf-8")
    return tmp_path


def _environment():
    return {**os.environ, "PYTHONPATH": str(ROOT), "MPLBACKEND": "Agg"}


def _commands(code: str):
    """The ``selectkit ...`` command lines of a shell block, as argument lists (after ``&&`` too)."""
    for line in code.splitlines():
        if not line.startswith("selectkit ") and "&& selectkit " not in line:
            continue  # sample output or another program
        for part in line.split("&&"):
            words = shlex.split(part, comments=True)
            if words and words[0] == "selectkit":
                yield words[1:]


def _check_calls_bind(code: str) -> int:
    """Bind every call of a name imported from selectkit to that function's signature; return how many."""
    tree = ast.parse(code)
    imported = {}
    for node in ast.walk(tree):
        if isinstance(node, ast.ImportFrom) and node.module and node.module.startswith("selectkit"):
            module = __import__(node.module, fromlist=["_"])
            for alias in node.names:
                imported[alias.asname or alias.name] = getattr(module, alias.name)
    bound = 0
    for node in ast.walk(tree):
        if isinstance(node, ast.Call) and isinstance(node.func, ast.Name) and node.func.id in imported:
            arguments = [ast.literal_eval(a) for a in node.args]
            keywords = {k.arg: ast.literal_eval(k.value) for k in node.keywords}
            inspect.signature(imported[node.func.id]).bind(*arguments, **keywords)
            bound += 1
    return bound


@pytest.mark.parametrize("path, language, code", BLOCKS)
def test_code_block(path, language, code, workspace):
    if language == "python":
        compile(code, f"{path.name} block", "exec")
        if any(host in code for host in _PLACEHOLDER_HOSTS):
            assert _check_calls_bind(code) >= 1
            return
        script = workspace / "block.py"
        script.write_text(code, encoding="utf-8")
        done = subprocess.run([sys.executable, str(script)], cwd=workspace, capture_output=True, text=True,
                              timeout=300, env=_environment())
        assert done.returncode == 0, f"{path.name} block failed:\n{done.stderr[-3000:]}"
    elif language == "toml":
        from selectkit.jobs import parse_job

        if "[data]" not in code:
            code = '[data]\ntable = "bays.csv"\nresponse = "yield_kg_m2"\n' + code
        parse_job(code, base=workspace, check_table=False)
    elif language in ("bash", "sh", "shell", ""):
        commands = list(_commands(code))
        if language == "" and not commands:
            return  # sample output, not commands
        for argv in commands:
            build_parser().parse_args(argv)  # an unknown option or value exits with 2 and fails the test
            if argv[0] in _RUN_COMMANDS:
                done = subprocess.run([sys.executable, "-m", "selectkit", *argv], cwd=workspace,
                                      capture_output=True, text=True, timeout=120, env=_environment())
                assert done.returncode == 0, done.stderr
    else:
        pytest.fail(f"{path.name}: a {language!r} block: teach this test how to check it")


def test_every_document_has_its_blocks_checked():
    # the blocks found are the blocks there are: a fence this test's pattern misses would go unchecked
    for path in DOCUMENTS:
        text = path.read_text(encoding="utf-8")
        fences = sum(1 for line in text.splitlines() if line.startswith("```"))
        assert fences == 2 * sum(1 for p in BLOCKS if p.values[0] == path), path.name
