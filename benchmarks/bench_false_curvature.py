"""False curved forms: how often the top model bends a variable whose effect is straight.

Run from the project root::

    python benchmarks/bench_false_curvature.py                # full run, gate vs no-gate (about 8 minutes)
    python benchmarks/bench_false_curvature.py --quick        # smoke run (under a minute)
    python benchmarks/bench_false_curvature.py --rule all     # the four rules below, side by side

Invented tables, each put through ``selectkit.search(frame, response=...,
seed=..., curvature_test=...)`` with otherwise default settings; the top model
(the best model of the best answer, ``result.ranking.subsets[0]``) is scored.

Straight truth, two kinds of predictor, 3 to 8 true ones correlated with each
other (a Gaussian copula with an exchangeable correlation ρ), noise predictors
(one correlated ρ with a true one), normal errors, R² about 0.3 to 0.9:

* **positive, right-skewed** (lognormal and gamma of several shapes, like bay
  measurements of a greenhouse: light, irrigation volume), where the gate tests
  x·log x added (the Box-Tidwell test of power 1);
* **crossing zero** (centred normal scores, night temperatures spread from −9
  to 39 °C, a centred gamma), where only x² and Yeo-Johnson are curved forms
  and the gate tests x² added.

For each it reports:

* **false curved**: the share of top models holding a true (linear) variable in
  a curved form (Box-Tidwell, Box-Cox, Yeo-Johnson, log, sqrt, reciprocal,
  square, a power), with a 95 % Wilson interval (Wilson 1927, computed by
  ``statsmodels.stats.proportion.proportion_confint``); **per true var**, the
  share of included true variables that are curved; **raw in answer**, of the
  falsely curved top models, the share whose every bent true variable has its
  raw form among the top answer's forms (``result.ranking.answer_forms[0]``,
  the forms within Δ ≤ 2 of the answer's best model);
* **missed**: share of true variables absent from the top model;
* **noise in**: mean number of noise variables in the top model;
* **exact set**: share of top models whose variables are exactly the true ones;
* which forms the false curvature came from (share per form).

Curved truth: y linear in log x1 and 1/x2, x3 straight, plus noise predictors,
to check that a rule that cures false curvature does not lose true curvature.
For x1 and x2 it reports how often the top model's form is the true one
(**best**), how often the true form is the best one or one of its answer-level
alternatives (**in answer**), and how often the form's power is within 0.3 of
the true one (**near**: a Box-Cox or Box-Tidwell power close to 0 or −1); for
x3, how often it is held raw and how often it is held at all.  Each rate is
given with its count; the pooled rows carry Wilson intervals.  Straight-truth
settings run 16 tables each and curved-truth settings 40 in the full run
(``--tables``, ``--curved-tables``).

Rules (``--rule``; "both" compares the first two):

``gate``
    selectkit's default, ``curvature_test=True``: a numeric predictor is offered
    curved forms only when the t of its curvature probe (x·log x, or x² for a
    predictor that crosses zero), added to the fit with the other predictors in
    it, has t² > log n (see ``selectkit._vetting._straight_families``).
``no-gate``
    ``curvature_test=False``: every form of every predictor is offered, as
    before the gate.
``charge``
    no gate, and every curved numeric form counts one more parameter in the
    criteria (the choice of form charged as fractional-polynomial selection
    charges a power, Royston & Altman 1994); the candidates and the search are
    unchanged.  Applied here only, by monkeypatching
    ``CandidateSet.powers_from_response`` (which otherwise charges the
    Box-Tidwell power alone); not a package option.
``gate+charge``
    the gate and the charge together.

The numbers are rates of simulated tables, not timings; the machine may be
shared.
"""

from __future__ import annotations

import os

for _var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

import argparse  # noqa: E402
import contextlib  # noqa: E402
import math  # noqa: E402
import sys  # noqa: E402
import time  # noqa: E402
import warnings  # noqa: E402
from collections import Counter  # noqa: E402

import numpy as np  # noqa: E402
import pandas as pd  # noqa: E402
from scipy import stats  # noqa: E402

sys.path.insert(0, os.path.dirname(os.path.dirname(os.path.abspath(__file__))))

import selectkit  # noqa: E402

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
from _data import print_table as _table  # noqa: E402
from selectkit import candidates as _candidates  # noqa: E402

#: Each rule studied: (curvature_test passed to selectkit.search, one parameter charged per curved form).
RULES = {
    "gate": (True, False),
    "no-gate": (False, False),
    "charge": (False, True),
    "gate+charge": (True, True),
}

#: Marginal distributions of the predictors: label -> maker of values from standard normal scores.
MARGINS = {
    "lognormal(0.5)": lambda z: 20.0 * np.exp(0.5 * z),
    "lognormal(1)": lambda z: 5.0 * np.exp(1.0 * z),
    "gamma(1)": lambda z: 4.0 * stats.gamma.ppf(stats.norm.cdf(z), 1.0),
    "gamma(2)": lambda z: 3.0 * stats.gamma.ppf(stats.norm.cdf(z), 2.0),
    "gamma(5)": lambda z: 2.0 * stats.gamma.ppf(stats.norm.cdf(z), 5.0),
    # crossing zero: the gate's x² probe
    "normal(0, 6)": lambda z: 6.0 * z,
    "temp -9..39": lambda z: -9.0 + 48.0 * stats.norm.cdf(z),
    "gamma(2)-2": lambda z: 3.0 * (stats.gamma.ppf(stats.norm.cdf(z), 2.0) - 2.0),
}

# ------------------------------------------------------------------------------------- data
def _scores(rng, n, n_true, n_noise, rho):
    """Standard normal scores: the true ones exchangeable with correlation ρ, noise 0 correlated ρ with true 0."""
    common = rng.standard_normal(n)
    Z = np.empty((n, n_true + n_noise))
    Z[:, :n_true] = math.sqrt(rho) * common[:, None] + math.sqrt(1.0 - rho) * rng.standard_normal((n, n_true))
    Z[:, n_true:] = rng.standard_normal((n, n_noise))
    if n_noise:
        Z[:, n_true] = rho * Z[:, 0] + math.sqrt(1.0 - rho * rho) * Z[:, n_true]
    return Z


def linear_table(rng, *, n, n_true, n_noise, rho, r2, margin):
    """A table whose response is linear in ``n_true`` predictors (x1..) of ``margin``, noise predictors after them.

    Effects are (1, −0.8, 0.6, −1, ...) per standard deviation of each predictor;
    the error variance makes the sample R² of the true model about ``r2``.
    """
    X = MARGINS[margin](_scores(rng, n, n_true, n_noise, rho))
    sizes = np.array([(1.0 - 0.2 * (i % 3)) * (-1) ** i for i in range(n_true)])
    signal = X[:, :n_true] @ (sizes / X[:, :n_true].std(axis=0))
    y = 50.0 + signal + math.sqrt(signal.var() * (1.0 - r2) / r2) * rng.standard_normal(n)
    frame = pd.DataFrame(X, columns=[f"x{j + 1}" for j in range(X.shape[1])])
    frame["yield_kg_m2"] = y
    return frame, {f"x{j + 1}": "identity" for j in range(n_true)}


def curved_table(rng, *, n, n_noise, rho, r2, margin):
    """y linear in log x1, 1/x2 and x3 (x3 straight), plus noise predictors."""
    X = MARGINS[margin](_scores(rng, n, 3, n_noise, rho))
    parts = np.column_stack([np.log(X[:, 0]), 1.0 / X[:, 1], X[:, 2]])
    signal = parts @ (np.array([1.0, 1.0, -0.8]) / parts.std(axis=0))
    y = 50.0 + signal + math.sqrt(signal.var() * (1.0 - r2) / r2) * rng.standard_normal(n)
    frame = pd.DataFrame(X, columns=[f"x{j + 1}" for j in range(X.shape[1])])
    frame["yield_kg_m2"] = y
    return frame, {"x1": "log", "x2": "reciprocal", "x3": "identity"}


def linear_settings(quick, kind):
    """(n, R², margin, true, noise, ρ) for the straight-truth tables; ``kind`` is "positive" or "crossing"."""
    if kind == "positive":
        variants = [("lognormal(0.5)", 3, 3, 0.5), ("gamma(2)", 5, 3, 0.5), ("lognormal(1)", 8, 4, 0.3)]
        if not quick:
            variants += [("gamma(1)", 4, 2, 0.6), ("gamma(5)", 6, 4, 0.4)]
    else:
        variants = [("normal(0, 6)", 3, 3, 0.5), ("temp -9..39", 5, 3, 0.5)]
        if not quick:
            variants += [("gamma(2)-2", 4, 2, 0.4)]
    ns = (100, 300) if quick else (100, 300, 1000)
    r2s = (0.3, 0.9) if quick else (0.3, 0.6, 0.9)
    return [dict(n=n, r2=r2, margin=margin, n_true=n_true, n_noise=n_noise, rho=rho)
            for n in ns for r2 in r2s for margin, n_true, n_noise, rho in variants]


def curved_settings(quick):
    """(n, R², margin, noise, ρ) for the curved-truth tables."""
    ns = (100, 300) if quick else (100, 300, 1000)
    margins = ("lognormal(0.5)", "gamma(2)") if quick else ("lognormal(0.5)", "gamma(2)", "lognormal(1)")
    return [dict(n=n, r2=0.6, margin=m, n_noise=3, rho=0.4) for n in ns for m in margins]


# ------------------------------------------------------------------------------------ rules
def _charged(self, subset):
    """One parameter per curved numeric form of a model (the charge rule; the package charges Box-Tidwell only)."""
    return sum(1 for j in subset if self.terms[j].kind == "numeric" and self.terms[j].transform != "identity")


@contextlib.contextmanager
def rule_applied(rule):
    """Yield the search options of a rule; for a charged rule, count curved forms in the criteria meanwhile."""
    if rule not in RULES:
        raise ValueError(f"unknown rule {rule!r}; choose one of {', '.join(RULES)}")
    curvature_test, charge = RULES[rule]
    original = _candidates.CandidateSet.powers_from_response
    try:
        if charge:
            _candidates.CandidateSet.powers_from_response = _charged
        yield {"curvature_test": curvature_test}
    finally:
        _candidates.CandidateSet.powers_from_response = original


# ---------------------------------------------------------------------------------- scoring
def _power_of(term):
    """The power a numeric form stands for (log 0, 1/x −1, ...); None for Yeo-Johnson."""
    params = dict(term.params)
    return {"identity": 1.0, "log": 0.0, "sqrt": 0.5, "reciprocal": -1.0, "square": 2.0}.get(
        term.transform, params.get("power", params.get("lambda")) if term.transform != "yeojohnson" else None)


class TopModel:
    """The top model of a search, by family, and the forms of the top answer.

    ``chosen`` maps each family of the best model of the best answer to its
    term; ``answer`` maps each of those families to the set of transforms it
    takes among the top answer's models within Δ ≤ 2 of its best
    (``result.ranking.answer_forms[0]``; just the best form when it stands alone).
    """

    def __init__(self, result):
        terms = result.candidates.terms
        by_name = {t.name: t for t in terms}
        self.chosen = {terms[j].family: terms[j] for j in result.ranking.subsets[0]}
        self.answer = {family: {term.transform} for family, term in self.chosen.items()}
        for family, names in result.ranking.answer_forms[0]:
            self.answer[family] = {by_name[name].transform for name in names}


def top_model(frame, seed, options):
    """Search one table with a rule's options (warnings silenced) and return its :class:`TopModel`."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        result = selectkit.search(frame, response="yield_kg_m2", seed=seed, **options)
    return TopModel(result)


def score_linear(top, truth):
    """Score a top model against a straight truth (``truth`` names the true variables)."""
    chosen = top.chosen
    true = set(truth)
    curved = [f for f in sorted(true & chosen.keys()) if chosen[f].transform != "identity"]
    return {
        "any_curved": bool(curved),
        "raw_in_answer": bool(curved) and all("identity" in top.answer[f] for f in curved),
        "curved": len(curved),
        "true_in": len(true & chosen.keys()),
        "missed": len(true - chosen.keys()),
        "n_true": len(true),
        "noise_in": len(chosen.keys() - true),
        "exact": set(chosen) == true,
        "forms": [chosen[f].transform for f in curved],
    }


def wilson(k, n):
    """95 % Wilson score interval of k successes in n (Wilson 1927), from statsmodels."""
    from statsmodels.stats.proportion import proportion_confint

    low, high = proportion_confint(k, n, alpha=0.05, method="wilson")
    return low, high


def _pct(x):
    return f"{100.0 * x:.0f}%"


def _rate(k, n):
    low, high = wilson(k, n)
    return f"{_pct(k / n)} [{_pct(low)}, {_pct(high)}]"




# --------------------------------------------------------------------------------- sections
def _progress(label, i, total, start):
    print(f"  [{label} {i + 1}/{total}, {time.perf_counter() - start:.0f} s]", file=sys.stderr, flush=True)


def run_linear(rules, settings, reps, seed, section, start):
    """Score the top model of every rule on ``reps`` tables of each straight-truth setting."""
    cells = {}  # (rule, setting index) -> list of scores
    for i, s in enumerate(settings):
        for rep in range(reps):
            rng = np.random.default_rng([seed, section, i, rep])
            frame, truth = linear_table(rng, n=s["n"], n_true=s["n_true"], n_noise=s["n_noise"], rho=s["rho"],
                                        r2=s["r2"], margin=s["margin"])
            for rule in rules:
                with rule_applied(rule) as options:
                    top = top_model(frame, rep, options)
                cells.setdefault((rule, i), []).append(score_linear(top, truth))
        _progress(f"straight truth, section {section}", i, len(settings), start)
    return cells


def _linear_summary(got):
    """The columns shared by the per-setting and the pooled rows."""
    k = sum(g["any_curved"] for g in got)
    true_in = sum(g["true_in"] for g in got)
    return [
        _rate(k, len(got)),
        _pct(sum(g["curved"] for g in got) / true_in) if true_in else "-",
        f"{sum(g['raw_in_answer'] for g in got)}/{k}" if k else "-",
        _pct(sum(g["missed"] for g in got) / sum(g["n_true"] for g in got)),
        f"{np.mean([g['noise_in'] for g in got]):.2f}",
        _rate(sum(g["exact"] for g in got), len(got)),
    ]


def report_linear(number, label, rules, settings, cells, reps):
    """Print the per-setting table, the pooled rows and the forms behind the false curvature."""
    measures = ["false curved [95% CI]", "per true var", "raw in answer", "missed", "noise in", "exact set [95% CI]"]
    rows = []
    for i, s in enumerate(settings):
        for rule in rules:
            rows.append([s["n"], s["r2"], s["margin"], f"{s['n_true']}+{s['n_noise']}", s["rho"], rule,
                         *_linear_summary(cells[(rule, i)])])
    _table(f"{number}a. Straight truth, {label}: top models holding a true variable in a curved form "
           f"({reps} tables per row)", ["n", "R2", "predictors", "true+noise", "rho", "rule", *measures], rows)

    rows = []
    for rule in rules:
        got = [g for (r, _), v in cells.items() if r == rule for g in v]
        rows.append([rule, "all", len(got), *_linear_summary(got)])
        for n in sorted({s["n"] for s in settings}):
            sub = [g for (r, i), v in cells.items() if r == rule and settings[i]["n"] == n for g in v]
            rows.append([rule, f"n={n}", len(sub), *_linear_summary(sub)])
    _table(f"{number}b. Straight truth, {label}, pooled (target: false curved ≤ 10 %)",
           ["rule", "rows", "tables", *measures], rows)

    rows = []
    for rule in rules:
        forms = Counter(f for (r, _), v in cells.items() if r == rule for g in v for f in g["forms"])
        total = sum(forms.values())
        shares = ", ".join(f"{form} {c} ({_pct(c / total)})" for form, c in forms.most_common()) if total else "none"
        rows.append([rule, total, shares])
    _table(f"{number}c. Straight truth, {label}: which forms bent the true variables (count and share)",
           ["rule", "bent true vars", "per form"], rows)


#: The power each true form stands for, to judge "near".
_TARGET_POWER = {"log": 0.0, "reciprocal": -1.0, "identity": 1.0}


def run_curved(rules, settings, reps, seed, start):
    """Tally, per rule and setting, how often each true form is found in the top model and in the top answer."""
    tallies = {}  # (rule, setting index) -> Counter
    for i, s in enumerate(settings):
        for rep in range(reps):
            rng = np.random.default_rng([seed, 2, i, rep])
            frame, truth = curved_table(rng, n=s["n"], n_noise=s["n_noise"], rho=s["rho"], r2=s["r2"],
                                        margin=s["margin"])
            for rule in rules:
                with rule_applied(rule) as options:
                    top = top_model(frame, rep, options)
                t = tallies.setdefault((rule, i), Counter())
                t["tables"] += 1
                for col, want in truth.items():
                    term = top.chosen.get(col)
                    power = None if term is None else _power_of(term)
                    t[f"{col} in"] += term is not None
                    t[f"{col} best"] += term is not None and term.transform == want
                    t[f"{col} answer"] += term is not None and want in top.answer[col]
                    t[f"{col} near"] += power is not None and abs(power - _TARGET_POWER[want]) <= 0.3
        _progress("curved truth", i, len(settings), start)
    return tallies


def report_curved(number, rules, settings, tallies, reps):
    """Print the curved-truth table per setting and pooled over the settings (with Wilson intervals)."""
    def cells(t, pooled):
        show = (lambda k: _rate(k, t["tables"])) if pooled else (lambda k: f"{k}/{t['tables']}")
        return [show(t["x1 best"]), show(t["x1 answer"]), show(t["x1 near"]),
                show(t["x2 best"]), show(t["x2 answer"]), show(t["x2 near"]),
                show(t["x3 best"]), show(t["x3 in"])]

    header = ["log x1 best", "in answer", "near", "1/x2 best", "in answer", "near", "x3 raw", "x3 in"]
    rows = [[s["n"], s["r2"], s["margin"], rule, *cells(tallies[(rule, i)], False)]
            for i, s in enumerate(settings) for rule in rules]
    _table(f"{number}a. Curved truth, y linear in log x1, 1/x2 and x3 ({reps} tables per row): the true form is the "
           "top model's (best), is among the top answer's forms within Δ ≤ 2 (in answer), or has a power within "
           "0.3 of the true one (near)", ["n", "R2", "predictors", "rule", *header], rows)
    rows = []
    for rule in rules:
        total = sum((t for (r, _), t in tallies.items() if r == rule), Counter())
        rows.append([rule, total["tables"], *cells(total, True)])
    _table(f"{number}b. Curved truth, pooled over the settings [95% CI]", ["rule", "tables", *header], rows)


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="fewer settings and tables, for a smoke run")
    parser.add_argument("--rule", default="both", choices=tuple(RULES) + ("both", "all"),
                        help="rule(s) to measure: both = gate and no-gate (default); all = every rule studied")
    parser.add_argument("--tables", type=int, default=None,
                        help="tables per straight-truth setting (default 3 quick, 16 full)")
    parser.add_argument("--curved-tables", type=int, default=None,
                        help="tables per curved-truth setting (default 4 quick, 40 full)")
    parser.add_argument("--seed", type=int, default=2024)
    args = parser.parse_args(argv)
    rules = {"both": ("gate", "no-gate"), "all": tuple(RULES)}.get(args.rule, (args.rule,))
    reps = args.tables or (3 if args.quick else 16)
    curved_reps = args.curved_tables or (4 if args.quick else 40)
    if reps < 1 or curved_reps < 1:
        parser.error("--tables and --curved-tables must be at least 1")
    print(f"selectkit false-curvature benchmark ({'quick' if args.quick else 'full'} run; rules: {', '.join(rules)}; "
          f"otherwise default search settings; seed {args.seed})")
    start = time.perf_counter()
    for number, (kind, label) in enumerate((("positive", "positive skewed predictors"),
                                            ("crossing", "predictors crossing zero")), start=1):
        settings = linear_settings(args.quick, kind)
        cells = run_linear(rules, settings, reps, args.seed, number - 1, start)
        report_linear(number, label, rules, settings, cells, reps)
    settings = curved_settings(args.quick)
    report_curved(3, rules, settings, run_curved(rules, settings, curved_reps, args.seed, start), curved_reps)
    print(f"\n{time.perf_counter() - start:.0f} s in all. Rates are of simulated tables; a real data set can "
          "differ, and the choice of form rests with the modeller.")


if __name__ == "__main__":
    main()
