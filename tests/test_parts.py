"""Tables read in parts: folders, globs, Dask DataFrames and large frames (selectkit.parts).

The reference for every number here is the same search on the table held in
memory (whose pieces are checked against statsmodels elsewhere), or an
independent computation written out in the test: a brute-force
leave-one-out loop for PRESS, numpy least squares on each fold's rows for
the CV error.
"""

from __future__ import annotations

import os

import numpy as np
import pandas as pd
import pytest

import selectkit
import selectkit.api
from selectkit import parts
from selectkit.errors import DataFileError, InputError, OptionError

RESPONSE = "yield_kg"


def _table(n, seed=1):
    rng = np.random.default_rng(seed)
    frame = pd.DataFrame({"light": rng.uniform(5, 30, n), "co2": rng.uniform(400, 1000, n),
                          "heat": rng.gamma(3, 2, n), "drift": rng.normal(size=n),
                          "house": rng.choice(["north", "south", "east"], n, p=[0.5, 0.3, 0.2])})
    frame[RESPONSE] = (5 + 3 * np.log(frame.light) + 0.01 * frame.co2 + (frame.house == "south") * 1.0
                       + rng.normal(0, 1, n))
    return frame


def _write_parts(frame, folder, count):
    os.makedirs(folder, exist_ok=True)
    for i, rows in enumerate(np.array_split(np.arange(len(frame)), count)):
        frame.iloc[rows].to_parquet(os.path.join(folder, f"part-{i:02d}.parquet"), index=False)
    return str(folder)


@pytest.fixture(scope="module")
def small(tmp_path_factory):
    frame = _table(3000)
    folder = _write_parts(frame, tmp_path_factory.mktemp("parts") / "bays", 4)
    return frame, folder


@pytest.fixture(scope="module")
def pair(small):
    frame, folder = small
    return selectkit.search(frame, response=RESPONSE), selectkit.search(folder, response=RESPONSE)


def test_a_folder_gives_the_shortlist_of_the_table_in_memory(pair):
    whole, parted = pair
    a, b = whole.shortlist, parted.shortlist
    assert list(a.terms) == list(b.terms)
    np.testing.assert_allclose(b.rss.to_numpy(), a.rss.to_numpy(), rtol=1e-10)
    np.testing.assert_allclose(b.bic.to_numpy(), a.bic.to_numpy(), rtol=1e-10)
    # PRESS in memory is one QR per model; in parts it is one pass from the all-row moments fit
    np.testing.assert_allclose(b.press.to_numpy(), a.press.to_numpy(), rtol=1e-8)
    assert parted.candidates.parts is not None and parted.candidates.parts.n_parts == 4
    assert parted.settings["n_rows"] == 3000


def test_press_of_a_table_in_parts_equals_a_leave_one_out_loop(pair, small):
    frame, _ = small
    parted = pair[1]
    top = parted.shortlist.iloc[0]
    X = parted.candidates.transform(frame)[:, [c for i in parted._subset(0) for c in parted.candidates.terms[i].columns]]
    A = np.column_stack([np.ones(len(frame)), X])
    y = frame[RESPONSE].to_numpy()
    loo = 0.0
    for i in range(0, len(frame)):  # brute force: refit without row i, predict it
        keep = np.arange(len(frame)) != i
        beta = np.linalg.lstsq(A[keep], y[keep], rcond=None)[0]
        loo += float((y[i] - A[i] @ beta) ** 2)
    assert top["press"] == pytest.approx(loo, rel=1e-8)


def test_cv_errors_of_a_table_in_parts_are_those_of_its_hashed_folds(pair, small):
    frame, folder = small
    parted = pair[1]
    key = parts._repeat_keys(0, 1)[0]  # seed 0, one repetition
    table = parts.open_parts(folder)  # each row's identity: its file and its row there
    labels = np.concatenate([parts.fold_labels(parts.row_ids(part, np.arange(part.rows)), _scheme(5), len(frame),
                                               key) for part in table.parts])
    assert len(labels) == len(frame) and len(np.bincount(labels)) == 5
    cols = [c for i in parted._subset(0) for c in parted.candidates.terms[i].columns]
    A = np.column_stack([np.ones(len(frame)), parted.candidates.transform(frame)[:, cols]])
    y = frame[RESPONSE].to_numpy()
    errors = []
    for j in range(5):  # numpy least squares on each fold's training rows, error on its test rows
        test = labels == j
        beta = np.linalg.lstsq(A[~test], y[~test], rcond=None)[0]
        errors.append(float(np.mean((y[test] - A[test] @ beta) ** 2)))
    assert parted.shortlist.iloc[0]["cv_mse"] == pytest.approx(np.mean(errors), rel=1e-9)


def _scheme(k):
    from selectkit.searches.crossval import shuffled_folds

    return shuffled_folds(k)


def test_fold_of_a_row_depends_only_on_its_position_and_the_seed():
    scheme = _scheme(5)
    key = parts._repeat_keys(7, 1)[0]
    whole = parts.fold_labels(np.arange(10_000), scheme, 10_000, key)
    pieces = np.concatenate([parts.fold_labels(np.arange(a, min(a + 999, 10_000)), scheme, 10_000, key)
                             for a in range(0, 10_000, 999)])
    np.testing.assert_array_equal(whole, pieces)
    counts = np.bincount(whole, minlength=5)
    assert np.all(np.abs(counts - 2000) < 4 * np.sqrt(2000 * 0.8))  # binomial sizes about n/K
    other = parts.fold_labels(np.arange(10_000), scheme, 10_000, parts._repeat_keys(8, 1)[0])
    assert np.mean(other == whole) < 0.4  # another seed, other folds (about 1/5 agree by chance)


def test_blocked_folds_are_the_contiguous_blocks_of_memory():
    from selectkit.searches.crossval import blocked_folds, make_folds

    n = 1003
    labels = parts.fold_labels(np.arange(n), blocked_folds(4), n, 0)
    for fold in make_folds(blocked_folds(4), n):
        assert np.all(labels[fold.test_rows] == fold.index)


@pytest.mark.slow
def test_a_dask_cluster_gives_the_same_shortlist_as_memory(small, pair):
    """Issue: the same table searched locally and on a cluster, to 1e-8 (LocalCluster, 2 worker processes)."""
    distributed = pytest.importorskip("distributed")
    dd = pytest.importorskip("dask.dataframe")
    _, folder = small
    whole = pair[0]
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True, dashboard_address=":0") as cluster:
        with distributed.Client(cluster):
            from_frame = selectkit.search(dd.read_parquet(folder), response=RESPONSE)
            from_folder = selectkit.search(folder, response=RESPONSE, backend="dask",
                                           scheduler=cluster.scheduler_address)
    for result in (from_frame, from_folder):
        assert list(result.shortlist.terms) == list(whole.shortlist.terms)
        np.testing.assert_allclose(result.shortlist.rss.to_numpy(), whole.shortlist.rss.to_numpy(), rtol=1e-8)
        np.testing.assert_allclose(result.shortlist.press.to_numpy(), whole.shortlist.press.to_numpy(), rtol=1e-8)
    # the local run in parts and the cluster run merge the same parts in the same order: equal CV errors too
    np.testing.assert_allclose(from_folder.shortlist.cv_mse.to_numpy(), pair[1].shortlist.cv_mse.to_numpy(),
                               rtol=1e-12)


def test_a_glob_and_a_single_parquet_file_read_in_parts(small, tmp_path, monkeypatch):
    frame, folder = small
    monkeypatch.setattr(parts, "PART_ROWS", 1000)  # row groups of 700 rows, gathered into parts of ≥ 1000
    by_glob = selectkit.search(os.path.join(folder, "part-0[0-2].parquet"), response=RESPONSE)
    assert by_glob.settings["n_rows"] == sum(len(r) for r in np.array_split(np.arange(3000), 4)[:3])
    path = tmp_path / "one.parquet"
    frame.to_parquet(path, index=False, row_group_size=700)
    one = selectkit.search(str(path), response=RESPONSE, read_in_parts="yes")
    assert one.candidates.parts.n_parts == 3  # 700+700, 700+700, 200
    assert list(one.shortlist.terms) == list(pair_terms(frame))


def pair_terms(frame):
    return selectkit.search(frame, response=RESPONSE).shortlist.terms


def test_a_sampled_table_checks_on_the_sample_and_ranks_on_every_row(tmp_path):
    frame = _table(24_000, seed=3)
    folder = _write_parts(frame, tmp_path / "big", 3)
    result = selectkit.search(folder, response=RESPONSE, check_sample_rows=4000)
    assert result.settings["n_rows"] == 24_000
    assert result.candidates.y.shape[0] == 4000
    assert result.checks(0).n == 4000
    assert result.terms(0) == ("log(light)", "co2", "house")
    whole = selectkit.search(frame, response=RESPONSE)
    # same candidate columns (no fitted power among the top model's), so the same rss on every row
    assert result.shortlist.iloc[0]["rss"] == pytest.approx(whole.shortlist.iloc[0]["rss"], rel=1e-10)
    notes = " ".join(n.message for n in result.dataset.report.notes)
    assert "seeded sample of 4000 rows" in notes


def test_a_bend_too_weak_for_the_sample_but_clear_on_every_row_keeps_its_curved_form(tmp_path):
    # Invented bays: yield follows 0.12·log(light), a bend the 5,000-row checks sample cannot show on its own
    # (t² ≤ log n there) but 200,000 rows show plainly.  The curvature screen scales the sample's evidence to
    # the table (t·√(N/n) against log N), so the log form reaches the search, which picks it on every row.
    import statsmodels.api as sm

    from selectkit.candidates import build_candidates
    from selectkit.data import prepare

    rng = np.random.default_rng(0)
    n = 200_000
    frame = pd.DataFrame({"light": rng.uniform(1, 10, n), "heat": rng.uniform(0, 1, n)})
    frame[RESPONSE] = 0.12 * np.log(frame.light) + frame.heat + rng.normal(0, 1, n)
    folder = _write_parts(frame, tmp_path / "weak", 4)
    result = selectkit.search(folder, response=RESPONSE, forms=("identity", "log"), check_sample_rows=5000)
    assert result.terms(0) == ("log(light)", "heat")
    # the sample alone, screened as a table of its own rows, has no evidence of the bend: the old refusal
    sample = result.dataset.frame.assign(**{RESPONSE: result.dataset.y})
    alone = build_candidates(prepare(sample, response=RESPONSE), forms=("identity", "log"))
    assert "log(light)" not in [t.name for t in alone.terms]
    # external check (statsmodels on all 200,000 rows): BIC prefers the log form by far
    bic = {name: sm.OLS(frame[RESPONSE], sm.add_constant(np.column_stack([f(frame.light), frame.heat]))).fit().bic
           for name, f in (("log", np.log), ("raw", lambda v: v))}
    assert bic["log"] < bic["raw"] - 10


def test_a_zero_in_one_part_outside_the_sample_still_rules_out_the_log(tmp_path):
    frame = _table(12_000, seed=4)
    frame.loc[11_500, "heat"] = 0.0  # one row, in the last part
    folder = _write_parts(frame, tmp_path / "zero", 3)
    parted = selectkit.api.prepare_candidates(folder, response=RESPONSE, check_sample_rows=1000, curvature_test=False)
    whole = selectkit.api.prepare_candidates(frame, response=RESPONSE, curvature_test=False)
    names = {t.name for t in parted[1].terms}
    assert "log(heat)" not in names
    # the same forms of heat as on every row in memory (their fitted powers come from the sample)
    assert {t.transform for t in parted[1].terms if "heat" in t.source} == \
        {t.transform for t in whole[1].terms if "heat" in t.source}


def test_the_reference_level_is_the_most_frequent_over_every_row(tmp_path):
    rng = np.random.default_rng(5)
    frame = _table(20_000, seed=5)
    frame["house"] = rng.choice(["east", "north", "south"], 20_000, p=[0.334, 0.333, 0.333])
    folder = _write_parts(frame, tmp_path / "levels", 2)
    full_reference = frame["house"].value_counts().idxmax()
    for rows in (1000, 2000, 5000):
        dataset, _ = selectkit.api.prepare_candidates(folder, response=RESPONSE, check_sample_rows=rows)
        assert dataset.frame["house"].cat.categories[0] == full_reference


def _bad_folder(tmp_path, frame, name):
    return _write_parts(frame, tmp_path / name, 3)


def test_an_infinite_value_is_named_by_part_and_row(tmp_path):
    frame = _table(900)
    frame.loc[650, "co2"] = np.inf
    folder = _bad_folder(tmp_path, frame, "inf")
    with pytest.raises(InputError, match=r"'co2' \(1 rows\).*part-02\.parquet.*row 51 of that part \(row 651 of"):
        selectkit.search(folder, response=RESPONSE)


def test_missing_values_are_refused_or_dropped_as_asked(tmp_path):
    frame = _table(900)
    frame.loc[[10, 700], "light"] = np.nan
    folder = _bad_folder(tmp_path, frame, "holes")
    with pytest.raises(InputError, match=r"missing values in 'light' \(2 rows\).*holes/part-00\.parquet', row 11 of that part"):
        selectkit.search(folder, response=RESPONSE)
    dropped = selectkit.search(folder, response=RESPONSE, incomplete_rows="drop")
    whole = selectkit.search(frame, response=RESPONSE, incomplete_rows="drop")
    assert dropped.settings["n_rows"] == 898 == whole.settings["n_rows"]
    np.testing.assert_allclose(dropped.shortlist.rss.to_numpy(), whole.shortlist.rss.to_numpy(), rtol=1e-10)


def test_parts_with_other_columns_are_refused_naming_the_part(tmp_path):
    frame = _table(900)
    folder = _bad_folder(tmp_path, frame, "columns")
    frame.iloc[:10].drop(columns=["drift"]).to_parquet(os.path.join(folder, "part-03.parquet"), index=False)
    with pytest.raises(InputError, match=r"part-03\.parquet.* lacks 'drift'"):
        selectkit.search(folder, response=RESPONSE)


def test_what_a_table_in_parts_cannot_do_is_refused_with_the_fix(small, tmp_path):
    _, folder = small
    with pytest.raises(OptionError, match="read_in_parts='no'"):
        selectkit.search(folder, response=RESPONSE, resamples=10)
    with pytest.raises(OptionError, match="several parts"):
        selectkit.search(folder, response=RESPONSE, read_in_parts="no")
    with pytest.raises(DataFileError, match="holds no .parquet or .csv"):
        selectkit.search(str(tmp_path), response=RESPONSE)
    with pytest.raises(DataFileError, match="no file matches"):
        selectkit.search(str(tmp_path / "*.parquet"), response=RESPONSE)


def test_csv_parts_read_each_file_with_the_csv_intake(small, tmp_path):
    frame, _ = small
    folder = tmp_path / "csv"
    folder.mkdir()
    for i, rows in enumerate(np.array_split(np.arange(len(frame)), 3)):
        frame.iloc[rows].to_csv(folder / f"bays-{i}.csv", index=False)
    result = selectkit.search(str(folder / "bays-*.csv"), response=RESPONSE)
    whole = selectkit.search(frame, response=RESPONSE)
    assert list(result.shortlist.terms) == list(whole.shortlist.terms)
    np.testing.assert_allclose(result.shortlist.rss.to_numpy(), whole.shortlist.rss.to_numpy(), rtol=1e-9)


def test_the_command_line_reads_a_folder(small, tmp_path, capsys):
    from selectkit import cli

    _, folder = small
    code = cli.main(["search", folder, "--response", RESPONSE, "--output", str(tmp_path / "out"), "--quiet"])
    assert code == 0
    shortlist = pd.read_csv(tmp_path / "out" / "shortlist.csv")
    assert len(shortlist) > 0


def test_a_data_fingerprint_of_a_folder_changes_with_any_file(small, tmp_path):
    from selectkit.jobs.store import data_fingerprint

    frame, _ = small
    folder = _write_parts(frame, tmp_path / "fp", 2)
    first = data_fingerprint(folder)
    assert first == data_fingerprint(folder)
    frame.iloc[:5].to_parquet(os.path.join(folder, "part-09.parquet"), index=False)
    assert data_fingerprint(folder) != first


def test_a_saved_result_of_a_table_in_parts_loads_with_its_record(pair, tmp_path):
    parted = pair[1]
    path = parted.save(tmp_path / "bays.skr")
    loaded = selectkit.load(path)
    assert list(loaded.shortlist.terms) == list(parted.shortlist.terms)
    assert loaded.candidates.parts.n_parts == 4 and loaded.candidates.parts.table is None


def _job(folder, table):
    text = (f'[data]\ntable = "{table}"\nresponse = "{RESPONSE}"\n\n[search]\nmethods = ["exhaustive"]\n\n'
            f'[run]\noutput = "results"\n')
    path = folder / "bays.toml"
    path.write_text(text)
    return path


def test_a_killed_job_on_a_folder_resumes_without_rereading_finished_parts(small, tmp_path, monkeypatch):
    from selectkit.jobs import load_job, run_job
    from selectkit.jobs.store import RunStore

    frame, _ = small
    _write_parts(frame, tmp_path / "bays", 6)
    job = _job(tmp_path, "bays")
    kept = {"part-moments": 0}
    original = RunStore.record_finished

    def record(self, stage, basis, value, **kw):  # the job is "killed" once three parts' moments are kept
        original(self, stage, basis, value, **kw)
        if stage.startswith("part-moments/"):
            kept["part-moments"] += 1
            if kept["part-moments"] == 3:
                raise KeyboardInterrupt

    monkeypatch.setattr(RunStore, "record_finished", record)
    with pytest.raises(KeyboardInterrupt):
        run_job(load_job(job))
    monkeypatch.setattr(RunStore, "record_finished", original)

    read = []
    load = parts._load
    monkeypatch.setattr(parts, "_load", lambda part, frame: read.append(part.label) or load(part, frame))
    outcome = run_job(load_job(job))
    assert outcome.complete
    # the survey and three parts' moments came from the store: only the other three parts were read, once
    # for their moments and once for PRESS (which every part needs), so 3 + 6 reads in all
    assert len(read) == 3 + 6, read
    whole = selectkit.search(frame, response=RESPONSE, methods=["exhaustive"])
    shortlist = pd.read_csv(tmp_path / "results" / "shortlist.csv")
    np.testing.assert_allclose(shortlist["rss"].to_numpy(), whole.shortlist.rss.to_numpy()[:len(shortlist)],
                               rtol=1e-8)  # the CSV holds 10 significant digits


def test_a_job_extended_with_new_files_reads_only_them_and_ranks_on_every_row(tmp_path, monkeypatch):
    from selectkit import cli
    from selectkit.jobs import extend_job, load_job, run_job

    frame = _table(4000, seed=6)
    first, later = frame.iloc[:3000], frame.iloc[3000:]
    _write_parts(first, tmp_path / "bays", 3)
    job = _job(tmp_path, "bays")
    before = run_job(load_job(job))
    assert before.complete
    with pytest.raises(selectkit.errors.JobFileError, match="no file joined the table"):
        extend_job(tmp_path / "results")
    for i, rows in enumerate(np.array_split(np.arange(len(later)), 2)):
        later.iloc[rows].to_parquet(tmp_path / "bays" / f"part-{10 + i:02d}.parquet", index=False)
    read = []
    load = parts._load
    monkeypatch.setattr(parts, "_load", lambda part, frame: read.append(part.ident) or load(part, frame))
    assert cli.main(["job", "extend", str(tmp_path / "results"), "--quiet"]) == 0
    # survey and moments: the new files only; then every file once for PRESS
    assert sorted(read[:4]) == ["part-10.parquet", "part-10.parquet", "part-11.parquet", "part-11.parquet"]
    assert len(read) == 4 + 5
    shortlist = pd.read_csv(tmp_path / "results" / "shortlist.csv")
    assert shortlist["terms"].iloc[0] == "log(light) + co2 + house"  # the invented truth
    # its rss on all 4000 rows, fitted by statsmodels on a design written out here (no fitted power in it)
    import statsmodels.api as sm

    design = pd.get_dummies(frame["house"], drop_first=False, dtype=float).drop(columns="north")
    design.insert(0, "co2", frame["co2"])
    design.insert(0, "log_light", np.log(frame["light"]))
    fit = sm.OLS(frame[RESPONSE], sm.add_constant(design)).fit()
    assert shortlist["rss"].iloc[0] == pytest.approx(fit.ssr, rel=1e-8)
    report = (tmp_path / "results" / "report.html").read_text()
    assert "part-10.parquet" in report and "joined the table" in report
    # a file read before that changes is refused: extending only adds rows
    first.iloc[:10].to_parquet(tmp_path / "bays" / "part-00.parquet", index=False)
    with pytest.raises(selectkit.errors.StoreError, match="changed or went away"):
        extend_job(tmp_path / "results")


def test_predictions_of_a_sampled_table_use_the_all_row_fit(tmp_path):
    import statsmodels.api as sm

    frame = _table(9000, seed=8)
    folder = _write_parts(frame, tmp_path / "predict", 3)
    result = selectkit.search(folder, response=RESPONSE, check_sample_rows=2000)
    cols = [c for i in result._subset(0) for c in result.candidates.terms[i].columns]
    X = result.candidates.transform(frame)[:, cols]
    fit = sm.OLS(frame[RESPONSE].to_numpy(), sm.add_constant(X)).fit()  # statsmodels on all 9000 rows
    np.testing.assert_allclose(result.predict(frame.iloc[:50]), fit.predict(sm.add_constant(X)[:50]), rtol=1e-9)
    with pytest.raises(OptionError, match="outer fold"):
        result.honest_error()
