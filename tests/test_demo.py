"""The bundled demo: data reproducible from the generator, and the whole job recovers the truth."""

import io
import subprocess
import sys

import pandas as pd
import pytest

import selectkit
from selectkit.demo import RESPONSE, TRUE_TERMS, demo_csv_path, make_greenhouse


def test_bundled_csv_is_what_the_generator_writes():
    path = demo_csv_path()
    assert path is not None, "demo/greenhouse.csv is missing from the checkout"
    buffer = io.StringIO()
    make_greenhouse().to_csv(buffer, index=False, lineterminator="\n")
    assert path.read_text() == buffer.getvalue()


@pytest.fixture(scope="module")
def demo_result():
    return selectkit.search(pd.read_csv(demo_csv_path()), response=RESPONSE, seed=0)


def test_demo_search_shortlists_the_generating_model(demo_result):
    shortlisted = [set(demo_result.terms(i)) for i in range(len(demo_result.shortlist))]
    assert set(TRUE_TERMS) in shortlisted


def test_checks_pass_on_the_generating_model(demo_result):
    index = [set(demo_result.terms(i)) for i in range(len(demo_result.shortlist))].index(set(TRUE_TERMS))
    checks = demo_result.checks(index)
    by_name = {c.name: c for c in checks.checks}
    linearity = [c for name, c in by_name.items() if "linear" in name.lower() or "reset" in name.lower()]
    assert linearity and all(c.passed is not False for c in linearity)


def test_demo_command_runs_end_to_end(tmp_path):
    proc = subprocess.run([sys.executable, "-m", "selectkit", "demo", "--out", str(tmp_path / "demo")],
                          capture_output=True, text=True, timeout=600)
    assert proc.returncode == 0, proc.stderr
    assert "generating model" in proc.stdout
    assert any(p.suffix == ".html" for p in (tmp_path / "demo").iterdir())
