"""Vetting the candidate set before a search: near-duplicate variables, collinear groups, curvature.

Two screens of :func:`selectkit.candidates.build_candidates` live here, apart
from the forms themselves:

* :func:`_set_aside_twins` finds source variables that measure the same thing
  (near-duplicates) or sit in a nearly collinear group among the raw columns,
  and sets all but one of each aside, with the reason and the rule that chose;
* :func:`_straight_families` tests each numeric predictor for curvature with
  the other predictors in the fit, so that curved forms are offered only where
  the data show a bend (:func:`added_column_t` gives the t statistics).

Both write only through the candidate builder's ``refuse``, ``notes`` and
``drop_families``, and neither depends on the order of the table's columns.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from scipy.stats import rankdata

from . import transforms as tf
from .settings import spell

#: Cycles of the curvature test with the other predictors held in their current forms (back-fitting);
#: it usually settles in two or three.
_CURVATURE_CYCLES = 5


def _keep_rule(a, b, protected, n_forms):
    """Which of two source variables to keep, and why in words.

    A forced one, then a preferred one, then the one with more usable forms,
    then the name that sorts first: a rule that does not depend on the order
    of the table's columns.
    """
    for rank, why in ((2, "it must be in every model"), (1, "you preferred it")):
        pa, pb = protected.get(a, 0) == rank, protected.get(b, 0) == rank
        if pa != pb:
            return (a, b, why) if pa else (b, a, why)
    if n_forms[a] != n_forms[b]:
        first, second = (a, b) if n_forms[a] > n_forms[b] else (b, a)
        return first, second, f"it has more usable forms ({n_forms[first]} to {n_forms[second]})"
    first, second = sorted((a, b))
    return first, second, "its name sorts first (they have as many usable forms)"


def _standardised(columns):
    """Columns centred and scaled to unit mean square (a constant column stays zero)."""
    z = columns - columns.mean(axis=0)
    peak = np.max(np.abs(z), axis=0)
    peak[~(peak > 0)] = 1.0
    z = z / peak  # first to the unit interval, so that squaring cannot overflow
    scale = np.sqrt(np.mean(z * z, axis=0))
    scale[~(scale > 0)] = 1.0
    return z / scale


def _set_aside_twins(builder, dataset, *, twin_limit, vif_limit, prefer, forced):
    """Find near-duplicate source variables and nearly collinear groups; set all but one of each aside.

    Two numeric variables are *twins* when the Spearman correlation of their raw values is at least
    0.99 (rank correlation is the same for every monotone form, and a single shared outlier cannot
    fake it) and their best-matching pair of forms has a Pearson |r| ≥ ``twin_limit``; which one is kept
    is :func:`_keep_rule`'s.  Then, among
    the raw columns that remain, the variable of largest VIF = (R⁻¹)ⱼⱼ (Marquardt 1970) is set aside
    while that VIF is at least ``vif_limit``; the group it belongs to is read off the eigenvector of the
    smallest eigenvalue of R, the near dependency (Belsley, Kuh & Welsch 1980).  A forced variable is
    never set aside, and a preferred one only after every other member of its group.

    Returns the set-aside families (in table order), with the refusals and the notes written to
    ``builder``.
    """
    numeric = [t.family for t in builder.terms if t.kind == "numeric"]
    families = sorted(set(numeric))  # by name: nothing here depends on the order of the columns
    order = {f: i for i, f in enumerate(families)}
    n_forms = {f: numeric.count(f) for f in families}
    protected = {f: 1 for f in prefer}
    protected.update({f: 2 for f in forced})
    aside: dict[str, str] = {}
    if len(families) < 2:
        return aside
    raw = np.column_stack([dataset.frame[f].to_numpy(dtype=np.float64) for f in families])
    n = raw.shape[0]
    if twin_limit is not None:
        ranks = _standardised(rankdata(raw, axis=0))
        spearman = ranks.T @ ranks / n
        forms = {f: [] for f in families}
        for t in builder.terms:
            if t.kind == "numeric":
                forms[t.family].append(t)
        pairs = []
        for i, j in zip(*np.nonzero(np.triu(np.abs(spearman) >= 0.99, k=1))):
            a, b = families[i], families[j]
            za = _standardised(np.column_stack([builder.columns[t.columns[0]] for t in forms[a]]))
            zb = _standardised(np.column_stack([builder.columns[t.columns[0]] for t in forms[b]]))
            r = np.abs(za.T @ zb / n)
            ia, ib = np.unravel_index(int(np.argmax(r)), r.shape)
            if r[ia, ib] >= twin_limit:
                pairs.append((-float(r[ia, ib]), order[a], order[b], forms[a][ia].name, forms[b][ib].name))
        for neg_r, ia, ib, name_a, name_b in sorted(pairs):
            a, b = families[ia], families[ib]
            if a in aside or b in aside:
                continue
            if protected.get(a) == 2 and protected.get(b) == 2:
                builder.notes.append(f"{a} and {b} are near-duplicates (|r| = {-neg_r:.6f} between {name_a} and "
                                     f"{name_b}), but both must be in every model, so both stay")
                continue
            keep, drop, why = _keep_rule(a, b, protected, n_forms)
            if keep != a:
                name_a, name_b = name_b, name_a
            aside[drop] = (f"set aside before the search: a near-duplicate of {keep} (|r| = {-neg_r:.6f} between "
                           f"{name_a} and {name_b}, at least {twin_limit:g}); {keep} is kept because {why} — "
                           f"give {spell('prefer', [drop])} to keep it instead")
            builder.notes.append(f"near-duplicates: {keep} and {drop} (|r| = {-neg_r:.6f} between {name_a} and "
                                 f"{name_b}); kept {keep} because {why}, set {drop} aside")
    if vif_limit is not None:
        left = [f for f in families if f not in aside]
        if len(left) >= n - 1:
            builder.notes.append(f"no VIF screen of the raw columns: {len(left)} numeric variables for {n} rows")
            left = []
        while len(left) >= 2:
            z = _standardised(np.column_stack([raw[:, order[f]] for f in left]))
            w, v = np.linalg.eigh(z.T @ z / n)
            if w[0] > 1e-12 * max(w[-1], 1.0):
                vif = np.sum(v * v / w, axis=1)
            else:  # an exact dependency: every variable in it has an unbounded VIF
                vif = np.where(np.abs(v[:, 0]) > 1e-6, np.inf, 1.0)
            candidates_ = [j for j in range(len(left)) if protected.get(left[j]) != 2 and vif[j] >= vif_limit]
            if not candidates_:
                break
            j = max(candidates_, key=lambda j: (protected.get(left[j]) != 1, vif[j], -order[left[j]]))
            group = [left[i] for i in np.argsort(-np.abs(v[:, 0])) if abs(v[i, 0]) >= 0.1 and i != j]
            shown = ", ".join(group[:6]) + (f" and {len(group) - 6} more" if len(group) > 6 else "")
            vif_text = "unbounded (an exact linear combination)" if not np.isfinite(vif[j]) else f"{vif[j]:.4g}"
            aside[left[j]] = (f"set aside before the search: VIF {vif_text} among the raw columns, at least "
                              f"{vif_limit:g} (Marquardt 1970); it is nearly a linear combination of {shown}; "
                              f"the variable of largest VIF goes first — give "
                              f"{spell('prefer', [left[j]])} to keep it and set another aside")
            builder.notes.append(f"nearly collinear: {left[j]} with {shown} (VIF {vif_text}); set {left[j]} aside")
            left.pop(j)
    for family in sorted(aside):
        builder.refuse(family, "every form", aside[family], name=family)
    if aside:
        builder.drop_families(set(aside))
    return aside


#: Above this many raw design columns the curvature test holds no other predictor in the fit (cost).
_CURVATURE_MAX_WIDTH = 300


def _bent(x, power):
    """x^α as a Box-Cox column ((u^α − 1)/α, log u at α = 0) of u = x / geometric mean of x."""
    u = np.log(x) - np.log(x).mean()
    return u if power == 0 else np.expm1(power * u) / power


def _probe(x, positive):
    """The column whose coefficient tests curvature of x: x·log x for a positive x (Box & Tidwell 1962), else x²."""
    if positive:
        u = np.log(x) - np.log(x).mean()  # x/gm(x) spans the same space with {1, x}: no overflow
        return np.exp(u) * u
    z = (x - x.mean()) / np.max(np.abs(x - x.mean()))
    return z * z


def added_column_t(design, y, probes, weights=None):
    """t statistics of each probe column added, one at a time, to the least-squares fit of y on ``design``.

    By the Frisch-Waugh-Lovell theorem the coefficient of a column z added to
    the fit of y on X is rᵀe/rᵀr, with r = z − P_X z and e = y − P_X y, and its
    t statistic is rᵀe / √(s²·rᵀr) with s² = (eᵀe − (rᵀe)²/rᵀr)/(n − rank X − 1):
    one factorisation of X serves every probe.

    Parameters
    ----------
    design : ndarray, shape (n, p)
        Holds the intercept column when one is wanted.
    y : ndarray, shape (n,)
    probes : ndarray, shape (n, q)
    weights : ndarray, optional
        Row weights (the fit is made on √w-scaled rows).

    Returns
    -------
    ndarray, shape (q,)
        NaN where a probe lies in the span of the design.
    """
    if weights is not None:
        root = np.sqrt(weights)
        design, y, probes = design * root[:, None], y * root, probes * root[:, None]
    scale = np.max(np.abs(design), axis=0)
    scale[~(scale > 0)] = 1.0
    if not np.all(np.isfinite(design)):
        return np.full(probes.shape[1], np.nan)
    from scipy.linalg import qr

    # A pivoted QR reveals the rank as the SVD does (the columns whose pivot falls below the same
    # relative tolerance are left out) at a fraction of its cost on many rows.
    q, r, _ = qr(design / scale, mode="economic", pivoting=True, check_finite=False)
    pivots = np.abs(np.diag(r))
    return _probe_t(q[:, pivots > (pivots[0] if pivots.size else 0.0) * max(design.shape) * np.finfo(float).eps],
                    y, probes)


def _probe_t(basis, y, probes):
    """The t statistics of :func:`added_column_t` from an orthonormal basis of the design's span (y, probes
    and the design all √w-scaled already)."""
    if not (np.all(np.isfinite(probes)) and np.all(np.isfinite(y))):
        return np.full(probes.shape[1], np.nan)
    # scaled only: t statistics do not change and sums of squares cannot overflow (centring would add a
    # constant, which lies outside the span of a √w-scaled design)
    spread = np.max(np.abs(y)) if y.size else 0.0
    if spread > 0 and np.isfinite(spread):
        y = y / spread
    e = y - basis @ (basis.T @ y)
    r = probes - basis @ (basis.T @ probes)
    rr = np.einsum("ij,ij->j", r, r)
    re = r.T @ e
    df = basis.shape[0] - basis.shape[1] - 1
    with np.errstate(divide="ignore", invalid="ignore"):
        s2 = (float(e @ e) - re * re / rr) / df
        t = re / np.sqrt(s2 * rr)
    t[~(rr > 1e-24 * np.einsum("ij,ij->j", probes, probes))] = np.nan
    return t if df > 0 else np.full(probes.shape[1], np.nan)


def _t_after(project, x, probe, y):
    """t of ``probe`` added to the fit of y on [nuisance, x], the nuisance space factorised in ``project``.

    The Frisch-Waugh-Lovell steps of :func:`added_column_t` with the design
    [nuisance, x]: residualise on the nuisance space (its basis already held),
    then on the residualised x (left out when it lies in the nuisance space).
    NaN where the probe lies in that span.
    """
    xr, r, e = project(x), project(probe), project(y)
    rank = project.rank
    xx = float(xr @ xr)
    own = x if project.scale is None else x * project.scale
    if xx > 1e-24 * float(own @ own):
        r = r - xr * (float(xr @ r) / xx)
        e = e - xr * (float(xr @ e) / xx)
        rank += 1
    rr, re = float(r @ r), float(r @ e)
    df = x.shape[0] - rank - 1
    if df <= 0 or not rr > 1e-24 * float(probe @ probe):
        return np.nan
    with np.errstate(divide="ignore", invalid="ignore"):
        return float(re / np.sqrt((float(e @ e) - re * re / rr) / df * rr))


class _LeaveOneOut:
    """One QR factorisation of a full-rank design D, and from it the projection off the span of D without
    one predictor's columns, for every predictor in turn.

    With D = QR (columns scaled, rows by √w), the columns of Q·R⁻ᵀ·E_J
    (E_J: the unit vectors of predictor J's columns) span the parts of D_J
    orthogonal to the other columns, so the residual maker of the design
    without J is M₋J v = v − Q(I − VVᵀ)Qᵀv, with V an orthonormal basis of
    R⁻ᵀE_J: exact (up to round-off) and about one matrix-vector product per
    use, where a factorisation per predictor costs one SVD of all rows each.
    """

    #: Largest ratio of R's largest to smallest diagonal entry (of the column-scaled design) taken as full
    #: rank here; beyond it each predictor's nuisance space is factorised on its own (our choice).
    CONDITION_LIMIT = 1e8

    def __init__(self, q, r_inv_t, scale, blocks):
        self.q, self.r_inv_t, self.scale, self.blocks = q, r_inv_t, scale, blocks

    @classmethod
    def of(cls, design, weights, blocks):
        """The factorisation of ``design`` (its first column the intercept), or None when it is not of
        full rank to within :data:`CONDITION_LIMIT`."""
        from scipy.linalg import qr, solve_triangular

        root = None if weights is None else np.sqrt(np.asarray(weights, dtype=float))
        d = design if root is None else design * root[:, None]
        top = np.max(np.abs(d), axis=0)
        if not (np.all(top > 0) and np.all(np.isfinite(d))):
            return None
        q, r = qr(d / top, mode="economic", check_finite=False)
        pivots = np.abs(np.diag(r))
        if not pivots.min() * cls.CONDITION_LIMIT > pivots.max():
            return None
        r_inv_t = solve_triangular(r, np.eye(r.shape[0]), trans="T", check_finite=False)
        return cls(q, r_inv_t, root, blocks)

    def added_t(self, y, probes):
        """:func:`added_column_t` of ``probes`` on the whole design, from this factorisation."""
        if self.scale is not None:
            y, probes = y * self.scale, probes * self.scale[:, None]
        return _probe_t(self.q, y, probes)

    def without(self, name):
        """The residual maker of the design without ``name``'s columns (``__call__``, ``rank``, ``scale``:
        what :func:`_t_after` and :func:`selectkit.transforms._box_tidwell` use)."""
        v, _ = np.linalg.qr(self.r_inv_t[:, self.blocks[name]])
        return _Without(self.q, v, self.q.shape[1] - v.shape[1], self.scale)


class _Without:
    """M₋J of :class:`_LeaveOneOut`: v ↦ v − Q(I − VVᵀ)Qᵀv, on √w-scaled v."""

    def __init__(self, q, v, rank, scale):
        self.q, self.v, self.rank, self.scale = q, v, rank, scale

    def __call__(self, x):
        if self.scale is not None:
            x = x * self.scale
        c = self.q.T @ x
        return x - self.q @ (c - self.v @ (self.v.T @ c))


def _straight_families(dataset, y, weights, shift_map, notes, represented=None):
    """Numeric predictors with no evidence of curvature once the other predictors are in the fit.

    For each numeric predictor x the curvature test is the t statistic of a
    probe column added to the fit of y on every predictor: x·log x for a
    positive x (x + c when a shift is asked) — the Box-Tidwell test of power 1
    (Box & Tidwell 1962) — and x² otherwise (for a variable that crosses zero,
    whose only curved forms are x² and Yeo-Johnson).  The other predictors
    are held raw at first (categorical ones as dummies), then, cycle after
    cycle, those found curved in their Box-Tidwell power, until the set of
    curved predictors no longer changes (the back-fitting of multivariable
    fractional-polynomial selection; Royston & Sauerbrei 2008,
    *Multivariable Model-building*, ch. 6 — cited from memory).  Evidence of
    curvature is t² > log n: the amount by which BIC must improve to pay for
    one more parameter, here the choice of a curved form.

    Why: tested on x alone, a straight effect bends whenever x is correlated
    with another true predictor; and among the six or so forms of a family
    one always fits the noise a little better than the raw form, which BIC
    does not charge for.

    The test runs on at most :data:`selectkit.transforms.PARAMETER_SAMPLE_ROWS`
    rows (the seeded sample the Box-Tidwell powers are fitted on; each cycle
    costs several least-squares fits over the rows).  When those n rows stand
    for a table of N > n rows (a larger table, or the sample of a table read
    in parts, ``represented`` = N), t is scaled to the table, t·√(N/n) (the t
    of a fixed bend grows as √n), and compared with log N: the forms the
    search on all N rows could tell apart are offered.
    A straight variable then passes more often than on a table of N rows
    (|t| > √(n·log N / N) on the sample), which the search on all rows,
    where the raw form fits best, mostly undoes.  ``benchmarks/bench_false_curvature.py`` measures
    how often the top model then bends a truly straight variable.

    Returns
    -------
    dict
        ``{column: reason}`` for the predictors offered in their raw form only.
    """
    raw = _raw_columns(dataset)
    big = max(dataset.n, int(represented or dataset.n))  # the rows the evidence stands for
    rows = tf.parameter_rows(dataset.n)  # above 50,000 rows: the seeded sample the powers are fitted on
    if rows is not None:
        raw = {name: v[rows] for name, v in raw.items()}
        y = np.asarray(y)[rows]
        weights = None if weights is None else np.asarray(weights)[rows]
    n = dataset.n if rows is None else rows.size
    scale = big / n  # t² on the sample times N/n: the t² the table would show for the same bend
    names = sorted(c for c in dataset.numeric if c in raw and np.ptp(raw[c]) > 0)  # by name: order-free
    if not names:
        return {}
    values, positive = {}, {}
    for col in names:
        values[col] = raw[col][:, 0] + shift_map.get(col, (0.0, False))[0]
        positive[col] = bool(np.min(values[col]) > 0)
    width = 1 + sum(v.shape[1] for v in raw.values())
    held = n >= width + 5 and width <= _CURVATURE_MAX_WIDTH
    if not held:
        why = "too few rows" if n < width + 5 else f"more than {_CURVATURE_MAX_WIDTH} columns"
        notes.append(f"curvature tested on each predictor alone ({why} to hold the others in the fit)")
    probes = np.column_stack([_probe(values[c], positive[c]) for c in names])
    power: dict[str, float] = {}
    statistic = dict.fromkeys(names, np.nan)
    order = sorted(raw)

    def design(current, exclude=None, blocks=None):
        """[1, every predictor in its current form], ``exclude`` left out; ``blocks`` (a dict) receives
        each predictor's column positions."""
        columns = [np.ones((n, 1))]
        at = 1
        for name in order:
            if name == exclude:
                continue
            if name not in current:
                columns.append(raw[name])
            elif positive[name]:
                columns.append(_bent(values[name], current[name])[:, None])
            else:  # curved, of both signs: held as x and x²
                columns.append(np.column_stack([raw[name], _probe(values[name], False)]))
            if blocks is not None:
                blocks[name] = np.arange(at, at + columns[-1].shape[1])
            at += columns[-1].shape[1]
        return np.column_stack(columns)

    def held_out(current, col, everyone):
        """The nuisance space of ``col`` (the others in their current forms): from the one factorisation
        of the whole design when it has full rank, else factorised on its own."""
        if everyone is not None:
            return everyone.without(col)
        return tf._Residualiser(n, weights, design(current, exclude=col)[:, 1:])

    for _cycle in range(_CURVATURE_CYCLES if held else 1):
        before = dict(power)
        if held:
            blocks: dict = {}
            whole = design(before, blocks=blocks)
            everyone = _LeaveOneOut.of(whole, weights, blocks)  # None when the design is rank-deficient
            t = added_column_t(whole, y, probes, weights) if everyone is None else everyone.added_t(y, probes)
            nuisance = {}  # per predictor: the others in their current forms, for its test and its power
            for j, col in enumerate(names):
                if col in before:  # its own column is curved in that design: test it against its raw form
                    nuisance[col] = held_out(before, col, everyone)
                    t[j] = _t_after(nuisance[col], raw[col][:, 0], probes[:, j], y)
        else:
            t = np.array([added_column_t(np.column_stack([np.ones(n), raw[c]]), y, probes[:, [j]], weights)[0]
                          for j, c in enumerate(names)])
        for j, col in enumerate(names):
            statistic[col] = float(t[j])
            if not (np.isfinite(t[j]) and t[j] * t[j] * scale > np.log(big)):
                power.pop(col, None)
                continue
            power[col] = 1.0
            if positive[col] and held:
                project = nuisance.get(col) or held_out(before, col, everyone)
                with np.errstate(over="ignore", invalid="ignore", divide="ignore"):
                    fitted = tf._box_tidwell(values[col], y, weights, None, 3.0, 1e-7, 50, project=project).power
                power[col] = fitted if fitted is not None else 1.0
            elif positive[col] and not held:
                fitted = tf.box_tidwell(values[col], y, weights=weights).power
                power[col] = fitted if fitted is not None else 1.0
        if power.keys() == before.keys():
            break
    on = (f"t² ≤ log n = {np.log(n):.2g}" if big == n else
          f"on a sample of {n:,} of {big:,} rows, t²·N/n = {{:.2g}} ≤ log N = {np.log(big):.2g}")
    return {col: (f"no evidence that {col} bends once the other predictors are in the fit (test of "
                  f"{'x·log x (Box-Tidwell, power 1)' if positive[col] else 'x²'} added: t = "
                  f"{statistic[col]:.2g}, {on.format(statistic[col] ** 2 * scale)}); only the raw form is "
                  f"offered — give {spell('curvature_test', False)} to offer every form")
            for col in names if col not in power}


def _raw_columns(dataset):
    """Raw numeric columns and categorical dummies (all levels but the first observed), by predictor."""
    out = {}
    for col in dataset.frame.columns:
        if col in dataset.numeric:
            out[col] = dataset.frame[col].to_numpy(dtype=np.float64)[:, None]
        elif col in dataset.categorical:
            codes = pd.Categorical(dataset.frame[col]).codes
            observed = np.unique(codes[codes >= 0])
            if observed.size > 1:
                out[col] = np.column_stack([(codes == k).astype(np.float64) for k in observed[1:]])
    return out
