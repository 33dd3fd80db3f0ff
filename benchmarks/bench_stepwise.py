"""Stepwise and cross-validated selection: selectkit side by side with what a modeller would do instead.

Run from the project root::

    python benchmarks/bench_stepwise.py           # (n, p) = (10 000, 100); several minutes
    python benchmarks/bench_stepwise.py --quick   # small smoke run, well under a minute

Four comparisons, on the same invented data (``benchmarks/_data.py``), one table each.
Each times the stage it studies *and* the path a user runs — ``selectkit.search``
on a DataFrame (intake, candidate forms, screens, moments, search, ranking,
checks of the best models) and the command line (``python -m selectkit search``
on a CSV, wall time of the whole process, report files included) — and every
baseline it names is run in the same run (none is extrapolated):

1. Forward and backward stepwise by AIC: selectkit (sweep operator on the
   moments) against a hand-written statsmodels loop that refits every
   candidate model with ``sm.OLS(...).fit()`` at every step.  Both use AIC
   (statsmodels counts k coefficients, selectkit k + 1 parameters: a constant
   shift, so the choices are the same) and stop when no move lowers it.  The
   table says whether the two choose exactly the same variables.  The full
   backward refit loop (p = 100) takes too long to finish here; by default it
   is run for its first ``--backward-steps`` steps, timed and compared step by
   step with selectkit's first steps (``--full`` runs it to the end).
2. scikit-learn ``SequentialFeatureSelector`` (forward, cv=5, stopping when
   the CV R² gains less than ``tol``): time, true and false positives,
   next to selectkit's forward and backward choices.
3. Cross-validated exhaustive search at p = 20, 5 folds × 10 repeats
   (``cv_select``, folds from moments by subtraction) against one exhaustive
   search on all rows, and the whole ``selectkit.search(methods=("crossval",))``.
4. Workers: the cold start-up of two loky workers, the time of each work unit
   and a small search on one and two workers (measured in fresh processes),
   the figures behind :data:`selectkit.parallel.WORKER_START_SECONDS`.

Method names are read from :data:`selectkit.api.METHODS` at run time.

BLAS threads are pinned to 1 for every contender (set before numpy loads) so the
timings compare algorithms, not thread contention on a shared machine.
"""

from __future__ import annotations

import os

for _var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

import argparse  # noqa: E402
import json  # noqa: E402
import subprocess  # noqa: E402
import sys  # noqa: E402
import tempfile  # noqa: E402
import time  # noqa: E402
import warnings  # noqa: E402

import numpy as np  # noqa: E402

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
sys.path.insert(0, os.path.dirname(os.path.dirname(os.path.abspath(__file__))))

from _data import candidates_for, linear_problem  # noqa: E402

from selectkit.moments import compute_moments  # noqa: E402
from selectkit.searches.crossval import cv_select, shuffled_folds  # noqa: E402
from selectkit.searches.stepwise import stepwise_search  # noqa: E402


def _timed(fn, *args, **kwargs):
    start = time.perf_counter()
    out = fn(*args, **kwargs)
    return out, time.perf_counter() - start


ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
RESPONSE = "yield_kg_m2"


def _method(name):
    """The method's name as ``selectkit.api.METHODS`` holds it now (both-ways stepwise was once "both")."""
    from selectkit.api import METHODS

    if name in METHODS:
        return name
    if name == "stepwise" and "both" in METHODS:
        return "both"
    raise SystemExit(f"selectkit.api.METHODS has no method {name!r}: {METHODS}")


def _frame(X, y):
    import pandas as pd

    frame = pd.DataFrame(X, columns=[f"x{j:03d}" for j in range(X.shape[1])])
    frame[RESPONSE] = y
    return frame


def _ratio(value):
    """A ratio with as many digits as it needs: 194x, 5.5x, 0.04x."""
    return f"{value:.0f}x" if value >= 10 else f"{value:.1f}x" if value >= 1 else f"{value:.2f}x"


def _column_indices(terms):
    return sorted(int(t[1:]) for t in terms)


def whole_call(frame, method, **options):
    """``selectkit.search`` on a DataFrame, identity forms only (as the stage sees the columns)."""
    import selectkit

    return selectkit.search(frame, response=RESPONSE, methods=(method,), forms=("identity",), **options)


def cli_call(frame, method, criterion):
    """Wall time of ``python -m selectkit search`` on the frame written as CSV (file writing not timed)."""
    with tempfile.TemporaryDirectory(prefix="selectkit-bench-") as folder:
        table = os.path.join(folder, "bays.csv")
        frame.to_csv(table, index=False)
        env = dict(os.environ, PYTHONPATH=ROOT + os.pathsep + os.environ.get("PYTHONPATH", ""))
        command = [sys.executable, "-m", "selectkit", "search", table, "-r", RESPONSE, "--methods", method,
                   "--forms", "identity", "--criterion", criterion, "-o", os.path.join(folder, "out"), "--quiet"]
        start = time.perf_counter()
        done = subprocess.run(command, capture_output=True, text=True, env=env, cwd=ROOT)
        seconds = time.perf_counter() - start
        if done.returncode != 0:
            raise SystemExit(f"the command line failed ({done.returncode}): {done.stderr.strip()}")
        import pandas as pd

        shortlist = pd.read_csv(os.path.join(folder, "out", "shortlist.csv"))
    return shortlist, seconds


# ------------------------------------------------------------- the reference loops
def statsmodels_forward(X, y):
    """Forward selection by AIC refitting every candidate with statsmodels (what one writes by hand)."""
    import statsmodels.api as sm

    n, p = X.shape
    chosen = []
    current = sm.OLS(y, np.ones((n, 1))).fit().aic
    path = []
    while True:
        best = None
        for j in range(p):
            if j in chosen:
                continue
            aic = sm.OLS(y, sm.add_constant(X[:, chosen + [j]])).fit().aic
            if best is None or aic < best[0]:
                best = (aic, j)
        if best is None or best[0] >= current:
            return sorted(chosen), path
        current = best[0]
        chosen.append(best[1])
        path.append(best[1])


def statsmodels_backward(X, y, max_steps=None):
    """Backward elimination by AIC with statsmodels refits; stops after ``max_steps`` drops if given."""
    import statsmodels.api as sm

    n, p = X.shape
    chosen = list(range(p))
    current = sm.OLS(y, sm.add_constant(X)).fit().aic
    path = []
    while chosen and (max_steps is None or len(path) < max_steps):
        best = None
        for j in chosen:
            keep = [c for c in chosen if c != j]
            A = sm.add_constant(X[:, keep]) if keep else np.ones((n, 1))
            aic = sm.OLS(y, A).fit().aic
            if best is None or aic < best[0]:
                best = (aic, j)
        if best[0] >= current:
            break
        current = best[0]
        chosen.remove(best[1])
        path.append(best[1])
    return sorted(chosen), path


def _positives(chosen, true):
    chosen, true = set(chosen), set(true)
    return len(chosen & true), len(chosen - true)


def _row(cells, widths):
    return "  ".join(str(c).ljust(w) for c, w in zip(cells, widths))


def _table(title, header, rows):
    widths = [max(len(str(r[i])) for r in [header] + rows) for i in range(len(header))]
    print(f"\n{title}")
    print(_row(header, widths))
    print(_row(["-" * w for w in widths], widths))
    for r in rows:
        print(_row(r, widths))


# ---------------------------------------------------------------------- sections
def bench_stepwise(n, p, n_true, backward_steps, full, seed=0):
    X, y, true = linear_problem(n=n, p=p, n_true=n_true, seed=seed)
    cand = candidates_for(X, y)
    stepwise_search(candidates_for(X[:50, :5], y[:50]))  # compile the kernels outside the timings
    moments, t_moments = _timed(compute_moments, cand.matrix, cand.y)
    fwd, t_fwd = _timed(stepwise_search, cand, moments, method="forward", criterion="aic", swaps=False)
    bwd, t_bwd = _timed(stepwise_search, cand, moments, method="backward", criterion="aic", start="full",
                        swaps=False)
    fwd_terms = sorted(fwd.details["final"][0])
    bwd_terms = sorted(bwd.details["final"][0])
    bwd_path = [int(s["term"][1:]) for s in bwd.details["path"][1:]]

    (ref_fwd, ref_fwd_path), t_ref_fwd = _timed(statsmodels_forward, X, y)
    steps = None if full else backward_steps
    (ref_bwd, ref_bwd_path), t_ref_bwd = _timed(statsmodels_backward, X, y, steps)
    rows = [
        ["forward AIC", f"{t_moments + t_fwd:.3f}", f"{t_ref_fwd:.2f}", f"{t_ref_fwd / (t_moments + t_fwd):.0f}x",
         "yes" if ref_fwd == fwd_terms else "NO", f"{len(fwd_terms)} terms, path of {len(fwd.details['path']) - 1} steps"],
    ]
    if steps is None or len(ref_bwd_path) < backward_steps:
        rows.append(["backward AIC", f"{t_moments + t_bwd:.3f}", f"{t_ref_bwd:.2f}",
                     f"{t_ref_bwd / (t_moments + t_bwd):.0f}x", "yes" if ref_bwd == bwd_terms else "NO",
                     f"{len(bwd_terms)} terms, path of {len(bwd_path)} steps"])
    else:
        # compare the same first drops on both sides: selectkit is timed for those steps only
        _, t_first = _timed(stepwise_search, cand, moments, method="backward", criterion="aic", start="full",
                            swaps=False, max_steps=len(ref_bwd_path))
        per_sk = (t_moments + t_first) / len(ref_bwd_path)
        per_ref = t_ref_bwd / len(ref_bwd_path)
        same = ref_bwd_path == bwd_path[: len(ref_bwd_path)]
        rows.append(["backward AIC (per step)", f"{per_sk:.4f}", f"{per_ref:.2f}", f"{per_ref / per_sk:.0f}x",
                     f"{'yes' if same else 'NO'} (first {len(ref_bwd_path)} drops)",
                     f"selectkit: {len(bwd_terms)} terms after {len(bwd_path)} steps in {t_moments + t_bwd:.3f} s; "
                     f"refit loop stopped after {len(ref_bwd_path)} steps"])
    _table(f"1. Stepwise by AIC, n = {n}, p = {p} ({len(true)} true effects); seconds "
           f"(the stage: stepwise_search on the moments, its one pass for them included, {t_moments:.3f} s)",
           ["search", "selectkit stage", "statsmodels loop", "speed-up", "same variables", "notes"], rows)

    # The same searches as a user runs them: the whole selectkit.search call and the command line.
    frame = _frame(X, y)
    whole_call(frame.iloc[:100, :5].assign(**{RESPONSE: y[:100]}), _method("forward"))  # warm imports
    user_rows = []
    for label, name, stage_terms, t_stage, t_loop in (
            ("forward AIC", "forward", fwd_terms, t_moments + t_fwd, t_ref_fwd),
            ("backward AIC", "backward", bwd_terms, t_moments + t_bwd,
             t_ref_bwd if steps is None or len(ref_bwd_path) < backward_steps else None)):
        method = _method(name)
        result, t_api = _timed(whole_call, frame, method, criterion="aic",
                               method_options={method: {"swaps": False}})
        api_terms = _column_indices(result.terms(0))
        shortlist, t_cli = cli_call(frame, method, "aic")
        cli_terms = _column_indices(shortlist["terms"].iloc[0].split(" + "))
        loop = "-" if t_loop is None else f"{t_loop:.2f}"
        for path, seconds, terms in ((f"selectkit.search(methods=({method!r},)), swaps off", t_api, api_terms),
                                     (f"python -m selectkit search -m {method} (defaults: swaps on)", t_cli,
                                      cli_terms)):
            user_rows.append([label, path, f"{seconds:.3f}", _ratio(seconds / t_stage), loop,
                              "-" if t_loop is None else _ratio(t_loop / seconds),
                              "yes" if terms == stage_terms else "NO"])
        user_rows.append([label, "the stage alone (as in table 1)", f"{t_stage:.3f}", "1.0x", loop,
                          "-" if t_loop is None else _ratio(t_loop / t_stage), "yes"])
    _table("1b. The same searches as a user runs them (whole call: intake, forms, screens, moments, search, "
           "ranking, checks; command line: wall time of the process, CSV read and report written)",
           ["search", "path", "seconds", "vs stage", "statsmodels loop", "loop / path", "same variables as stage"],
           user_rows)
    return X, y, true, fwd_terms, bwd_terms, t_moments + t_fwd, t_moments + t_bwd


def bench_sklearn(X, y, true, fwd_terms, bwd_terms, t_fwd, t_bwd, tol):
    from sklearn.feature_selection import SequentialFeatureSelector
    from sklearn.linear_model import LinearRegression

    sfs = SequentialFeatureSelector(LinearRegression(), n_features_to_select="auto", tol=tol, direction="forward",
                                    cv=5)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        _, t_sfs = _timed(sfs.fit, X, y)
    sfs_terms = list(np.flatnonzero(sfs.get_support()))
    # BIC's heavier penalty is the usual choice when the aim is to find the true effects
    cand = candidates_for(X, y)
    (bic_found, t_bic) = _timed(lambda: stepwise_search(cand, method="forward", criterion="bic", swaps=False))
    bic_terms = sorted(bic_found.details["final"][0])
    method = _method("forward")
    whole, t_whole = _timed(whole_call, _frame(X, y), method, criterion="bic")
    whole_terms = _column_indices(whole.terms(0))
    cli_shortlist, t_cli = cli_call(_frame(X, y), method, "bic")
    cli_terms = _column_indices(cli_shortlist["terms"].iloc[0].split(" + "))
    rows = []
    for name, chosen, seconds in (("selectkit forward AIC (stage)", fwd_terms, t_fwd),
                                  ("selectkit backward AIC (stage)", bwd_terms, t_bwd),
                                  ("selectkit forward BIC (stage, moments pass included)", bic_terms, t_bic),
                                  (f"selectkit.search(methods=({method!r},), criterion='bic') (whole call)",
                                   whole_terms, t_whole),
                                  (f"python -m selectkit search -m {method} --rank-by bic (command line)",
                                   cli_terms, t_cli),
                                  (f"sklearn SequentialFeatureSelector (cv=5, tol={tol})", sfs_terms, t_sfs)):
        tp, fp = _positives(chosen, true)
        rows.append([name, f"{seconds:.3f}", _ratio(t_sfs / seconds) if "sklearn" not in name else "1x",
                     len(chosen), f"{tp}/{len(true)}", fp])
    _table(f"2. Against scikit-learn's sequential selector, same data ({len(true)} true effects)",
           ["selector", "seconds", "speed-up vs sklearn", "chosen", "true positives", "false positives"], rows)


def bench_crossval(n, p, repeats, large_n=None, seed=0):
    from selectkit.searches.exhaustive import exhaustive_search

    X, y, true = linear_problem(n=n, p=p, n_true=6, seed=seed + 5)
    cand = candidates_for(X, y)
    exhaustive_search(candidates_for(X[:60, :6], y[:60]), n_best_per_size=1)  # compile outside the timings

    def one_search():
        return exhaustive_search(cand, compute_moments(cand.matrix, cand.y), n_best_per_size=1)

    def cv_search(n_jobs=1):
        return cv_select(cand, method="exhaustive", folds=shuffled_folds(5, repeats=repeats), seed=seed,
                         moments=compute_moments(cand.matrix, cand.y), n_jobs=n_jobs)

    single, t_single = _timed(one_search)
    cv1, t_cv1 = _timed(cv_search)
    cv2, t_cv2 = _timed(cv_search, 2)
    tp, fp = _positives(cv1.details["chosen"], true)
    rows = [
        ["one exhaustive search (moments + search)", f"{t_single:.3f}", "1.0x", ""],
        [f"cv_select, 5 folds x {repeats} repeats, n_jobs=1", f"{t_cv1:.3f}", f"{t_cv1 / t_single:.1f}x",
         f"chose k = {cv1.details['chosen_k']}: {tp}/{len(true)} true, {fp} false"],
        [f"cv_select, 5 folds x {repeats} repeats, n_jobs=2", f"{t_cv2:.3f}", f"{t_cv2 / t_single:.1f}x",
         "same choice" if cv2.details["chosen"] == cv1.details["chosen"] else "DIFFERENT CHOICE"],
    ]
    # the path a user runs: the whole call with the same folds (the stage chose cv1's model)
    method = _method("crossval")
    frame = _frame(X, y)
    for n_jobs in (1, 2):
        whole, t_whole = _timed(whole_call, frame, method, seed=seed, workers=n_jobs,
                                method_options={method: {"folds": shuffled_folds(5, repeats=repeats)}})
        chosen = _column_indices(whole.terms(0))
        rows.append([f"selectkit.search(methods=({method!r},)), same folds, workers={n_jobs} (whole call)",
                     f"{t_whole:.3f}", f"{t_whole / t_single:.1f}x",
                     f"top model {'=' if chosen == sorted(cv1.details['chosen']) else '!='} cv_select's choice"])
    if large_n:
        # The searches cost the same at any n (they run on moments); only the one data pass grows with n.
        X, y, true = linear_problem(n=large_n, p=p, n_true=6, seed=seed + 5)
        cand = candidates_for(X, y)
        single_big, t_single_big = _timed(one_search)
        cv_big, t_cv_big = _timed(cv_search)
        tp, fp = _positives(cv_big.details["chosen"], true)
        rows += [
            [f"one exhaustive search, n = {large_n}", f"{t_single_big:.3f}", "1.0x", ""],
            [f"cv_select, 5 x {repeats}, n = {large_n}, n_jobs=1", f"{t_cv_big:.3f}",
             f"{t_cv_big / t_single_big:.1f}x", f"chose k = {cv_big.details['chosen_k']}: {tp}/{len(true)} true, "
             f"{fp} false"],
        ]
    _table(f"3. Cross-validated exhaustive search, p = {p}, n = {n} unless said ({5 * repeats + 1} searches in "
           "the CV run)", ["run", "seconds", "ratio to one search", "notes"], rows)


_WORKER_PROBE = r"""
import json, os, sys, time
sys.path.insert(0, os.path.join(sys.argv[1], "benchmarks"))
import numpy as np, pandas as pd, selectkit
from selectkit import api, parallel
from _data import linear_problem
p, method = int(sys.argv[2]), sys.argv[3]
X, y, _ = linear_problem(n=2000, p=p, n_true=6, seed=0)
frame = pd.DataFrame(X, columns=[f"x{j:03d}" for j in range(p)]); frame["yield_kg_m2"] = y
kw = dict(response="yield_kg_m2", methods=(method,), forms=("identity",), seed=0)
selectkit.search(frame.iloc[:200, [0, 1, 2, 3, -1]], **kw)  # imports and kernels loaded here first
def timed(fn, *a, **k):
    t = time.perf_counter(); fn(*a, **k); return time.perf_counter() - t
def best_of_two(fn, *a, **k):  # the faster of two calls: leaves out one-time costs of the first
    return min(timed(fn, *a, **k), timed(fn, *a, **k))
setup = api.prepare_search(frame, **kw)
unit_seconds = [timed(run.module.run_unit, u) for run, units, keys in setup.planned for u in units]
out = {"units": len(unit_seconds), "unit_median": float(np.median(unit_seconds)), "unit_max": max(unit_seconds)}
out["units_here"] = best_of_two(api.run_methods, setup, n_jobs=1)
out["search_1"] = best_of_two(selectkit.search, frame, workers=1, **kw)
out["search_2_rule"] = best_of_two(selectkit.search, frame, workers=2, **kw)
parallel.WORKER_START_SECONDS = 0.0  # force the workers: every unit after the first goes to them
out["units_cold_pool"] = timed(api.run_methods, setup, n_jobs=2)
out["units_warm_pool"] = timed(api.run_methods, setup, n_jobs=2)
out["search_2_forced"] = best_of_two(selectkit.search, frame, workers=2, **kw)
print(json.dumps(out))
"""


def bench_workers(cases):
    """Cold start-up of two loky workers and the work per unit, each case in a fresh process."""
    from selectkit.parallel import WORKER_START_SECONDS

    rows, starts = [], []
    for p, name in cases:
        method = _method(name)
        done = subprocess.run([sys.executable, "-c", _WORKER_PROBE, ROOT, str(p), method], capture_output=True,
                              text=True, cwd=ROOT, env=dict(os.environ, PYTHONPATH=ROOT))
        if done.returncode != 0:
            raise SystemExit(f"worker probe failed: {done.stderr.strip()[-2000:]}")
        m = json.loads(done.stdout.strip().splitlines()[-1])
        start = m["units_cold_pool"] - m["units_here"]  # what a cold pool adds to the same units
        if m["units"] > 1:  # one unit never goes to a worker: nothing measured
            starts.append(start)
        rows.append([f"p = {p}, {method}", m["units"], f"{1e3 * m['unit_median']:.2f} / {1e3 * m['unit_max']:.1f}",
                     f"{m['units_here']:.3f}", f"{m['units_cold_pool']:.3f}", f"{m['units_warm_pool']:.3f}",
                     f"{start:.2f}", f"{m['search_1']:.3f}", f"{m['search_2_rule']:.3f}",
                     _ratio(m["search_1"] / m["search_2_rule"]), _ratio(m["search_1"] / m["search_2_forced"])])
    _table("4. Workers, n = 2000, identity forms; each case in a fresh process (its first pool is cold); seconds "
           "unless said", ["case", "units", "unit ms median / max", "units here", "units, cold pool of 2",
                           "warm pool", "start-up (cold - here)", "search n_jobs=1 (best of 2)", "search n_jobs=2 (rule)",
                           "speed-up (rule)", "speed-up (workers forced, warm)"], rows)
    print(f"  measured cold start-up of two workers: {min(starts):.2f}-{max(starts):.2f} s; selectkit.parallel "
          f"takes WORKER_START_SECONDS = {WORKER_START_SECONDS} s, so two workers start only for more than "
          f"{2 * WORKER_START_SECONDS:.1f} s of projected work")


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="small sizes, for a smoke run")
    parser.add_argument("--full", action="store_true", help="run the statsmodels backward loop to the end")
    parser.add_argument("--backward-steps", type=int, default=5,
                        help="steps of the statsmodels backward loop when not --full (default 5)")
    args = parser.parse_args(argv)
    if args.quick:
        n, p, n_true, cv_n, cv_p, repeats, large_n = 2000, 30, 6, 1000, 12, 10, None
    else:
        n, p, n_true, cv_n, cv_p, repeats, large_n = 10_000, 100, 12, 10_000, 20, 10, 500_000
    print(f"selectkit stepwise benchmark ({'quick' if args.quick else 'full'} run); BLAS threads pinned to 1")
    X, y, true, fwd, bwd, t_fwd, t_bwd = bench_stepwise(n, p, n_true, args.backward_steps, args.full or args.quick)
    bench_sklearn(X, y, true, fwd, bwd, t_fwd, t_bwd, tol=1e-4)
    bench_crossval(cv_n, cv_p, repeats, large_n)
    bench_workers([(30, "exhaustive"), (12, "crossval")] if args.quick else
                  [(30, "exhaustive"), (40, "exhaustive"), (20, "crossval")])


if __name__ == "__main__":
    main()
