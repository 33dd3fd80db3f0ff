"""One vocabulary: every setting is defined once (selectkit.settings) and read the same on the three surfaces.

The notebook keyword, the job-file key and the command-line flag share one name; a value written on any
surface is checked by the same rule and arrives as the same value; a former spelling is refused with the
current one; and a hint in a message names the setting as the surface the user is on writes it.
"""

from __future__ import annotations

import inspect
import subprocess
import sys

import numpy as np
import pandas as pd
import pytest

import selectkit
from selectkit import api, cli, settings
from selectkit.errors import JobFileError, OptionError, SelectkitError
from selectkit.jobs import parse_job
from selectkit.jobs.starter import starter_job

#: A value other than the default for every setting, to follow through each surface.
EXAMPLES = {
    "response": "yield_kg_m2",
    "predictors": ("light", "co2"),
    "always_include": ("light",),
    "leave_out": ("sensor",),
    "row_weights": "area",
    "incomplete_rows": "drop",
    "keep_id_columns": ("bay",),
    "decimal_mark": ",",
    "read_in_parts": "yes",
    "check_sample_rows": 20000,
    "time_ordered": True,
    "forms": ("identity", "log"),
    "fractional_polynomials": True,
    "shifts": {"age": 1.0, "water": "auto"},
    "interactions": (("light", "co2"),),
    "response_form": "boxcox:0.5",
    "prefer": ("light",),
    "twin_limit": 0.99,
    "vif_limit": None,
    "curvature_test": False,
    "methods": ("exhaustive", "stepwise"),
    "method_options": {"exhaustive": {"max_size": 6}},
    "exact_limit": 30,
    "criterion": "aicc",
    "aim": "predict",
    "parameter_count": "coefficients-only",
    "shortlist_size": 4,
    "keep_within": 2.5,
    "folds": 7,
    "resamples": 20,
    "honest_folds": 3,
    "split_fraction": 0.5,
    "seed": 12,
    "workers": 2,
    "backend": "threading",
    "scheduler": "tcp://scheduler.example:8786",
    "scheduler_timeout": 3.0,
    "time_budget": 5400.0,
    "detailed_answers": 1,
    "output": "bays-results",
}


def test_every_setting_has_an_example_here():
    assert set(EXAMPLES) == set(settings.BY_NAME)
    for name, value in EXAMPLES.items():
        assert settings.check_value(name, value) == value, name  # the examples are plain values already
        assert value != settings.BY_NAME[name].default, name


# --------------------------------------------------------------------------- the notebook face
def test_search_signature_lists_every_python_setting_with_its_default():
    params = inspect.signature(selectkit.search).parameters
    python = [s for s in settings.SETTINGS if settings.PYTHON in s.surfaces]
    assert list(params) == ["data"] + [s.name for s in python]
    for s in python:
        p = params[s.name]
        assert p.kind is inspect.Parameter.KEYWORD_ONLY
        assert (p.default is inspect.Parameter.empty) if s.required else (p.default == s.default), s.name
    assert inspect.signature(api.prepare_search).parameters.keys() == params.keys()


def test_help_of_search_documents_every_setting():
    doc = selectkit.search.__doc__
    for s in settings.SETTINGS:
        if settings.PYTHON in s.surfaces:
            assert f"\n    {s.name} : " in doc, s.name
            assert s.flag in doc  # and says how the command line spells it


@pytest.mark.parametrize("old, new", sorted(settings.FORMER[settings.PYTHON].items()))
def test_a_former_keyword_is_refused_with_the_current_one(old, new):
    with pytest.raises(OptionError, match="did you mean"):
        api.prepare_search("no-such-file.csv", response="y", **{old: 1})


def test_a_misspelt_keyword_gets_the_nearest_name():
    with pytest.raises(OptionError, match=r"unknown keyword 'shortlist_sise' \(did you mean 'shortlist_size'\?\)"):
        selectkit.search("no-such-file.csv", response="y", shortlist_sise=3)


# --------------------------------------------------------------------------- the three surfaces agree
def _cli_value(name, value):
    """The value the command line gives for ``--name TEXT``, TEXT written as the table writes it."""
    setting = settings.BY_NAME[name]
    parser = cli.build_parser()
    argv = ["search", "t.csv", "-r", "y"] if name != "response" else ["search", "t.csv"]
    if setting.kind is settings.FLAG:
        argv.append(settings.spell(name, value, where="cli"))
    else:
        argv += [setting.flag, setting.kind.cli(value)]
    args = parser.parse_args(argv)
    return settings.resolve(cli._given(args, cli._SEARCH_SETTINGS), where="cli")[name]


def _job_value(name, value, tmp_path):
    setting = settings.BY_NAME[name]
    sections = {s: [] for s in settings.SECTIONS}
    sections["data"] += ['table = "t.csv"', 'response = "y"'] if name != "response" else ['table = "t.csv"']
    if name == "method_options":
        text_extra = "\n".join(f"[search.{m}]\n" + "\n".join(f"{k} = {v}" for k, v in opts.items())
                               for m, opts in value.items())
    else:
        text_extra = ""
        sections[setting.section].append(f"{name} = {setting.kind.toml(value)}")
    if name == "scheduler":
        sections["run"].append('backend = "dask"')
    if name in ("method_options",):
        sections["search"].append('methods = ["exhaustive"]')
    text = "\n".join(f"[{s}]\n" + "\n".join(lines) for s, lines in sections.items()) + "\n" + text_extra
    spec = parse_job(text, base=tmp_path, check_table=False)
    got = getattr(spec, name)
    if name == "output":
        return str(got.relative_to(tmp_path.resolve()))
    return got


@pytest.mark.parametrize("name", sorted(EXAMPLES))
def test_a_value_arrives_the_same_from_every_surface(name, tmp_path):
    value = EXAMPLES[name]
    setting = settings.BY_NAME[name]
    if settings.PYTHON in setting.surfaces:
        assert settings.resolve({"response": "y", name: value} if name != "response" else {name: value})[name] \
            == value
    assert _cli_value(name, value) == value
    assert _job_value(name, value, tmp_path) == value


def test_every_command_line_setting_is_a_flag_of_search():
    parser = cli.build_parser()
    search = parser._subparsers._group_actions[0].choices["search"]
    flags = set(search._option_string_actions)
    for s in settings.SETTINGS:
        if settings.CLI in s.surfaces:
            assert s.flag in flags, s.flag


def test_the_starter_job_file_names_every_job_setting(tmp_path):
    table = tmp_path / "bays.csv"
    pd.DataFrame({"yield_kg_m2": [1.0, 2.0, 3.0], "light": [1.0, 2.0, 4.0]}).to_csv(table, index=False)
    text = starter_job(table)
    for s in settings.SETTINGS:
        if settings.JOB in s.surfaces:
            assert f"{s.name} = " in text or (s.name == "method_options" and "[search.exhaustive]" in text), s.name


@pytest.mark.parametrize("name, bad", [
    ("folds", 1), ("resamples", -1), ("shortlist_size", 0), ("seed", -3), ("workers", 0),
    ("keep_within", -1.0), ("twin_limit", 1.5), ("vif_limit", 0.5), ("aim", "guess"),
    ("parameter_count", "both"), ("criterion", "r2"), ("methods", ("exhaustiv",)),
    ("incomplete_rows", "maybe"), ("time_budget", "soon"), ("response_form", "cube"),
])
def test_a_bad_value_is_refused_on_every_surface_naming_the_setting(name, bad, tmp_path):
    setting = settings.BY_NAME[name]
    with pytest.raises(OptionError, match=name):
        settings.resolve({"response": "y", name: bad})
    with pytest.raises(OptionError, match=setting.flag):
        settings.check_value(name, bad, where="cli")
    text = setting.kind.toml(bad) if not isinstance(bad, str) else f'"{bad}"'
    if isinstance(bad, tuple):
        text = "[" + ", ".join(f'"{b}"' for b in bad) + "]"
    head = '[data]\ntable = "t.csv"\nresponse = "y"\n'
    job = head + (f"{name} = {text}\n" if setting.section == "data" else f"[{setting.section}]\n{name} = {text}\n")
    with pytest.raises(JobFileError, match=rf"\[{setting.section}\] {name}"):
        parse_job(job, base=tmp_path, check_table=False)


@pytest.mark.parametrize("old", ["offer", "keep_twins", "all_forms", "convention"])
def test_a_former_job_key_is_refused_with_the_current_one(old, tmp_path):
    section = "ranking" if old == "convention" else "forms"
    job = f'[data]\ntable = "t.csv"\nresponse = "y"\n[{section}]\n{old} = true\n'
    with pytest.raises(JobFileError, match=rf"'{old}' in \[{section}\] was renamed; did you mean"):
        parse_job(job, base=tmp_path, check_table=False)


@pytest.mark.parametrize("old", sorted(settings.FORMER[settings.CLI]))
def test_a_former_flag_is_refused_with_the_current_one(old, capsys):
    with pytest.raises(SystemExit) as stop:
        cli.main(["search", "t.csv", "-r", "y", old, "1"])
    assert stop.value.code == 2
    err = capsys.readouterr().err
    assert f"{old} was renamed; did you mean {settings.FORMER[settings.CLI][old]}?" in err


# --------------------------------------------------------------------------- messages speak the surface
def _gappy_table(path):
    rng = np.random.default_rng(3)
    frame = pd.DataFrame({"yield_kg_m2": rng.normal(size=30), "light": rng.normal(size=30)})
    frame.loc[4, "light"] = np.nan
    frame.to_csv(path, index=False)
    return path


def test_a_hint_names_the_keyword_in_python(tmp_path):
    table = _gappy_table(tmp_path / "bays.csv")
    with pytest.raises(SelectkitError, match=r"give incomplete_rows='drop'"):
        api.prepare_candidates(table, response="yield_kg_m2")


def test_a_hint_names_the_flag_at_the_command_line(tmp_path):
    table = _gappy_table(tmp_path / "bays.csv")
    proc = subprocess.run([sys.executable, "-m", "selectkit", "search", str(table), "-r", "yield_kg_m2",
                           "--output", str(tmp_path / "out")], capture_output=True, text=True, timeout=120)
    assert proc.returncode == 2
    assert "give --incomplete-rows drop" in proc.stderr and "incomplete_rows=" not in proc.stderr


def test_a_hint_names_the_key_in_a_job_file(tmp_path):
    from selectkit.jobs import run_job

    _gappy_table(tmp_path / "bays.csv")
    job = tmp_path / "job.toml"
    job.write_text('[data]\ntable = "bays.csv"\nresponse = "yield_kg_m2"\n')
    with pytest.raises(SelectkitError, match=r'give \[data\] incomplete_rows = "drop"'):
        run_job(job, progress=False)


def test_spell_writes_each_kind_as_its_surface_reads_it():
    # Python: the keyword as code; command line: the flag and its text; job file: the key in its section.
    assert settings.spell("shifts", {"age": 1.0}, where="python") == "shifts={'age': 1}"
    assert settings.spell("shifts", {"age": 1.0}, where="cli") == "--shifts age=1"
    assert settings.spell("shifts", {"age": 1.0}, where="job") == "[forms] shifts = { age = 1 }"
    assert settings.spell("curvature_test", False, where="cli") == "--no-curvature-test"
    assert settings.spell("curvature_test", False, where="job") == "[forms] curvature_test = false"
    assert settings.spell("leave_out", ["x"], where="cli") == "--leave-out x"
