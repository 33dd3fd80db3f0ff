"""A short plain-text summary for the terminal, and the cautions every output carries."""

from __future__ import annotations

import textwrap

import math

__all__ = ["CAUTIONS", "SHORT_CAUTION", "printable", "summary"]

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

_SHORT_ESCAPES = {"\t": "\\t", "\n": "\\n", "\r": "\\r"}
#: Characters a terminal acts on instead of showing: C0 controls, DEL, C1 controls, the bidirectional
#: overrides and isolates (which reorder what is shown) and the Unicode line and paragraph separators.
_UNSHOWN = [*range(0x00, 0x20), *range(0x7F, 0xA0), 0x200E, 0x200F, *range(0x202A, 0x202F),
            *range(0x2066, 0x206A), 0x2028, 0x2029]
_ESCAPES = {code: _SHORT_ESCAPES.get(chr(code), f"\\x{code:02x}" if code < 0x100 else f"\\u{code:04x}")
            for code in _UNSHOWN}


def printable(text) -> str:
    r"""``text`` with every character a terminal would act on shown as an escape instead.

    Column names, levels and file names come from the user's files; printed
    raw, an escape sequence such as ``ESC[2J`` clears the screen and a newline
    forges a line of output. Control characters (C0, DEL, C1), the
    bidirectional overrides and the Unicode line separators are shown as
    ``\x1b``, ``\n``, ``\u202e``...; everything else, backslashes included,
    is kept as it is. Applying it twice changes nothing more.

    Examples
    --------
    >>> print(printable("light\x1b[31m\nCO2"))
    light\x1b[31m\nCO2
    """
    return str(text).translate(_ESCAPES)


def _number(value) -> str:
    try:
        value = float(value)
    except (TypeError, ValueError):
        return str(value)
    if not math.isfinite(value):
        return "—"
    return f"{value:.4g}" if abs(value) < 1e5 else f"{value:.6g}"


def _mark(check) -> str:
    """The check's level in brackets, padded so the verdicts line up: ``[fine]``, ``[worth a look]``..."""
    level = getattr(check, "level", None) or {True: "fine", False: "a problem", None: "not assessed"}[check.passed]
    return f"[{level}]".ljust(len("[worth a look]"))


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
    weight_name = shortlist.weight_criterion.upper()
    lines.append(f"Answers, best first: each is a set of variables, shown in its best forms; weight is the summed "
                 f"{weight_name} weight of every model holding exactly those variables.")
    # Terms are the point of the table: print them whole, wrapped at the "+" between terms.
    lines.append(f"  {'#':>2}  {'Δ':>7}  {'weight':>6}  terms of the best model")
    indent = " " * 23
    for _, row in table.iterrows():
        terms = printable(row["terms"]) or "(intercept only)"
        wrapped = textwrap.wrap(terms, width=_TERMS_WIDTH, break_long_words=False, break_on_hyphens=False)
        lines.append(f"  {int(row['answer']):>2}  {float(row['delta_from_best']):>7.2f}  "
                     f"{float(row['answer_weight']):>6.3f}  {wrapped[0] if wrapped else ''}")
        lines.extend(indent + part for part in wrapped[1:])
        if row.get("form_alternatives"):
            alternatives = textwrap.wrap(f"as good within Δ ≤ 2: {printable(row['form_alternatives'])}",
                                         width=_TERMS_WIDTH, break_long_words=False, break_on_hyphens=False)
            lines.extend(indent + part for part in alternatives)
    lines.append(f"  ({len(shortlist.scored)} models make {int(shortlist.scored['answer'].max())} answers; "
                 "the model-level list is in models.csv and in the report.)")
    if shortlist.fits:
        lines.append("")
        lines.append("Best model: " + shortlist.fits[0].equation)
    if diagnoses:
        best = diagnoses[0]
        fitted_on = shortlist.fits[0].n if shortlist.fits else best.n
        lines.append("Checks of the best model:" if best.n >= fitted_on else
                     f"Checks of the best model (on a seeded sample of {best.n} of its {fitted_on} rows):")
        for check in best.checks:
            lines.append(f"  {_mark(check)} {check.aspect}: {check.verdict}")
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
    # Names come from the user's files: no line may carry a control character to the terminal.
    return "\n".join(printable(line) for line in lines)
