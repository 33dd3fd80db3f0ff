"""Outputs of a run: the shortlist as CSV and JSON, a self-contained HTML report, figures, a text summary.

:func:`write_outputs` is the single entry point that writes every file of a
run into one folder, each atomically (a temporary file in the same folder,
then ``os.replace``), so a reader never sees a half-written file.
"""

from __future__ import annotations

from pathlib import Path

__all__ = ["OUTPUT_NAMES", "write_outputs"]

#: File names written by :func:`write_outputs`, by label.
OUTPUT_NAMES = {
    "shortlist_csv": "shortlist.csv",
    "shortlist_json": "shortlist.json",
    "report_html": "report.html",
}


def write_outputs(folder, *, settings, candidates, founds, shortlist, diagnoses, stability=None,
                  honest=None) -> dict:
    """Write ``shortlist.csv``, ``shortlist.json`` and ``report.html`` into ``folder``.

    Parameters
    ----------
    folder : str or Path
        Created when missing.
    settings : dict
        The job's settings (plain values), shown in the report and copied into the JSON.
    candidates : CandidateSet
    founds : sequence of Found
    shortlist : selectkit.rank.Shortlist
    diagnoses : sequence of Diagnosis
        One per shortlisted model, in shortlist order (may cover only the first ones).
    stability : Stability, optional
    honest : NestedResult, optional
        Honest error of the whole procedure (outer cross-validation).

    Returns
    -------
    dict
        Label (``shortlist_csv``, ``shortlist_json``, ``report_html``) → Path of the file written.

    Raises
    ------
    InputError
        If the JSON document would not follow the shipped schema (a bug, reported rather than written).
    """
    from . import html, tables

    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    founds = list(founds or ())
    diagnoses = list(diagnoses or ())
    document = tables.shortlist_document(shortlist=shortlist, candidates=candidates, settings=settings,
                                         founds=founds, diagnoses=diagnoses, stability=stability, honest=honest)
    tables.check_document(document)
    paths = {
        "shortlist_csv": tables.write_csv(folder / OUTPUT_NAMES["shortlist_csv"], shortlist),
        "shortlist_json": tables.write_json(folder / OUTPUT_NAMES["shortlist_json"], document),
    }
    paths["report_html"] = html.write_html(
        folder / OUTPUT_NAMES["report_html"], shortlist=shortlist, settings=settings, candidates=candidates,
        founds=founds, diagnoses=diagnoses, stability=stability, honest=honest,
    )
    return paths
