"""The stages after the search report how far they have come (selectkit._stages), so a bar or a job's log can
cover finishing: ranking, bootstrap resamples, outer folds of the honest error, checks, report.

External check: the number of resamples and outer folds reported equals the number the stability and the
honest error say they used (``Stability.n_boot``, the honest error's table of folds), counted independently.
"""

from __future__ import annotations

import io

import numpy as np
import pandas as pd

import selectkit
from selectkit import _stages
from selectkit.jobs import run_job
from selectkit.jobs.progress import StageShow


def _bays(n=90, seed=4):
    rng = np.random.default_rng(seed)
    frame = pd.DataFrame({"light": rng.uniform(2, 40, n), "co2": rng.uniform(300, 900, n),
                          "humidity": rng.uniform(40, 90, n)})
    frame["yield_kg_m2"] = 1 + 0.8 * np.log(frame["light"]) + 0.002 * frame["co2"] + rng.normal(0, 0.2, n)
    return frame


def test_every_stage_after_the_search_reports_its_steps_to_the_end(tmp_path):
    heard = []
    with _stages.heard_by(lambda stage, done, total: heard.append((stage, done, total))):
        result = selectkit.search(_bays(), response="yield_kg_m2", forms=("identity", "log"), resamples=4,
                                  honest_folds=2, shortlist_size=3, seed=0)
        result.write(tmp_path)
    order = list(dict.fromkeys(stage for stage, _, _ in heard))
    assert order == ["ranking the pooled models", "bootstrap resamples", "outer folds of the honest error",
                     "checking the shortlisted models", "writing the report"]
    for stage in order:
        steps = [(done, total) for s, done, total in heard if s == stage]
        dones = [d for d, _ in steps]
        assert dones == sorted(dones) and dones[-1] == steps[-1][1]  # counts up, ends at its total
    last = {stage: total for stage, _, total in heard}
    assert last["bootstrap resamples"] == result.stability.n_boot == 4
    assert last["outer folds of the honest error"] == len(result.honest.folds) == 2
    assert last["checking the shortlisted models"] == len(result.models)


def test_outside_a_listener_the_steps_are_silent(capsys):
    _stages.step("anything", 1, 2)  # no listener: nothing happens, nothing printed
    assert capsys.readouterr() == ("", "")


def test_plain_lines_say_when_each_stage_starts_and_ends():
    stream = io.StringIO()
    logged = []
    show = StageShow("lines", prefix="job bays: ", stream=stream, log=logged.append, interval=3600)
    for done in range(4):
        show("bootstrap resamples", done, 3)
    show("writing the report", 0, 1)
    show("writing the report", 1, 1)
    show.close()
    lines = stream.getvalue().splitlines()
    assert len(lines) == 4  # start and end of each stage; the middle steps fall inside the interval
    assert lines[0].endswith("job bays: bootstrap resamples: 0 of 3")
    assert "bootstrap resamples: done (3)" in lines[1] and "writing the report: done (1)" in lines[3]
    assert logged[0] == "bootstrap resamples: 0 of 3" and logged[1].startswith("bootstrap resamples: done in")


def test_a_job_log_records_the_stages_of_its_finishing(tmp_path):
    _bays().to_csv(tmp_path / "bays.csv", index=False)
    (tmp_path / "bays.toml").write_text(
        '[data]\ntable = "bays.csv"\nresponse = "yield_kg_m2"\n\n[forms]\nforms = ["identity", "log"]\n\n'
        '[search]\nmethods = ["exhaustive"]\n\n[ranking]\nshortlist_size = 3\nresamples = 3\n\n'
        '[run]\nseed = 1\noutput = "out"\n')
    outcome = run_job(tmp_path / "bays.toml", progress=False)
    assert outcome.complete
    from selectkit.jobs.store import RunStore

    store = RunStore.open_read_only(tmp_path / "out")
    text = "\n".join(message for _, _, message in store.log_lines())
    for stage in ("ranking the pooled models", "bootstrap resamples", "checking the shortlisted models",
                  "writing the report"):
        assert f"{stage}: done in" in text, stage


def test_on_a_terminal_the_command_line_shows_a_bar_for_each_stage_after_the_search(tmp_path, monkeypatch):
    import sys

    from selectkit import cli

    class Terminal(io.StringIO):
        def isatty(self):
            return True

    _bays().to_csv(tmp_path / "bays.csv", index=False)
    screen = Terminal()
    monkeypatch.setattr(sys, "stderr", screen)
    assert cli.main(["search", str(tmp_path / "bays.csv"), "-r", "yield_kg_m2", "--forms", "identity,log",
                     "--resamples", "3", "--output", str(tmp_path / "out")]) == 0
    shown = screen.getvalue()
    for stage in ("searching", "ranking the pooled models", "bootstrap resamples", "checking the shortlisted models",
                  "writing the report"):
        assert stage in shown, stage
    assert "3/3" in shown  # the resamples' bar reached its total
