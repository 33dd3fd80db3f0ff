"""A short plain-text summary for the terminal, and the cautions every output carries."""

from __future__ import annotations

import textwrap

import math

__all__ = ["CAUTIONS", "SHORT_CAUTION", "summary"]

#: The cautions shown with every shortlist (title, text).
CAUTIONS = (
    ("Selection makes p-values and intervals optimistic",
     "The data chose these models, and the same data produced their standard errors, p-values and "
     "confidence intervals. They are computed as if the model had been fixed in advance, so they are "
     "too small and too narrow. For an honest estimate of prediction error use the cross-validated "
     "columns, and check the chosen model on rows it has never seen (a held-out part or new data)."),
    ("Association is not causation",
     "A term in the best model is associated with the response in these data. It does not show that "
     "changing the variable would change the response; unmeasured conditions and the way the data were "
     "collected can produce the same pattern."),
    ("No extrapolation",
     "The equations describe the response only within the range of the data they were fitted to. "
     "Transformed terms (logs, reciprocals, powers) can behave very differently outside that range."),
    ("Decisions rest with you",
     "selectkit ranks and checks models; it does not decide. Which model to use, and whether it is fit "
     "for a purpose, rests with the practitioner, their knowledge of the subject and local professional "
     "standards."),
)

SHORT_CAUTION = ("Caution: p-values and intervals of a selected model are optimistic (trust the CV error "
                 "and a held-out check); association is not causation; do not extrapolate beyond the "
                 "data; the decision rests with you and local professional standards.")


_TERMS_WIDTH = 78


def _number(value) -> str:
    try:
        value = float(value)
    except (TypeError, ValueError):
        return str(value)
    if not math.isfinite(value):
        return "—"
    return f"{value:.4g}" if abs(value) < 1e5 else f"{value:.6g}"


def _mark(passed) -> str:
    return {True: "ok  ", False: "FAIL", None: "n/a "}[passed]


def _same_variables(table) -> str:
    """A line naming listed models that hold the same variables in different forms, if any."""
    if "variables" not in table or len(table) < 2:
        return ""
    groups: dict = {}
    for _, row in table.iterrows():
        groups.setdefault(row["variables"], []).append(int(row["position"]))
    shared = [positions for positions in groups.values() if len(positions) > 1]
    if not shared:
        return ""
    listed = "; ".join(", ".join(map(str, p)) for p in shared)
    return (f"Models {listed} hold the same variables in different forms: the data tell those forms apart "
            "only weakly; look at the variables' support rather than at one form.")


def summary(*, shortlist, settings=None, founds=(), diagnoses=(), paths=None, top=5, honest=None) -> str:
    """A few lines for the terminal: searches, criterion, top models, checks of the best, cautions, files.

    Parameters
    ----------
    shortlist : selectkit.rank.Shortlist
    settings : dict, optional
        The job's settings (``response`` is shown when present).
    founds : sequence of Found
    diagnoses : sequence of Diagnosis
        The first one (the best model's) is summarised.
    paths : dict, optional
        Files written, label → path.
    top : int, default 5
        Models listed.
    honest : NestedResult, optional
        The honest error of the whole procedure, when it was estimated.

    Returns
    -------
    str
    """
    settings = dict(settings or {})
    lines = []
    response = settings.get("response")
    head = "selectkit shortlist" + (f" for {response}" if response else "")
    lines.append(f"{head}: {len(shortlist.scored)} distinct models pooled from "
                 f"{len(founds)} search(es), {shortlist.n} rows.")
    for found in founds:
        proof = "exact" if found.exact else "not proven exact"
        lines.append(f"  {found.method}: {found.evaluated} subsets evaluated, {found.pruned} pruned, "
                     f"{proof}; {found.stopped_by}")
    lines.append(f"Ranked by {shortlist.criterion.upper()}: {shortlist.criterion_reason}")
    lines.append("")
    table = shortlist.table.head(top)
    # Terms are the point of the table: print them whole, wrapped at the "+" between terms.
    lines.append(f"  {'#':>2}  {'Δ':>7}  {'weight':>6}  terms")
    indent = " " * 23
    for _, row in table.iterrows():
        terms = str(row["terms"]) or "(intercept only)"
        wrapped = textwrap.wrap(terms, width=_TERMS_WIDTH, break_long_words=False, break_on_hyphens=False)
        lines.append(f"  {int(row['position']):>2}  {float(row['delta_from_best']):>7.2f}  "
                     f"{float(row['model_weight']):>6.3f}  {wrapped[0] if wrapped else ''}")
        lines.extend(indent + part for part in wrapped[1:])
    same = _same_variables(table)
    if same:
        lines.append(same)
    if shortlist.fits:
        lines.append("")
        lines.append("Best model: " + shortlist.fits[0].equation)
    if diagnoses:
        best = diagnoses[0]
        lines.append("Checks of the best model:")
        for check in best.checks:
            lines.append(f"  [{_mark(check.passed)}] {check.aspect}: {check.verdict}")
    if honest is not None:
        lines.append(f"Honest error of the whole procedure (outer CV): {_number(honest.error)} "
                     f"± {_number(honest.standard_error)}; the CV error of the chosen model, "
                     f"{_number(honest.naive_error)}, is optimistic by {_number(honest.optimism)}.")
    for note in shortlist.notes:
        lines.append("Note: " + note)
    lines.append("")
    lines.append(SHORT_CAUTION)
    if paths:
        lines.append("Files written:")
        for label, path in paths.items():
            lines.append(f"  {label}: {path}")
    return "\n".join(lines)
