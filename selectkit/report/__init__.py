"""Outputs of a run: the shortlist as CSV and JSON, a self-contained HTML report, figures, a text summary.

:func:`write_outputs` is the single entry point that writes every file of a
run into one folder as one set (see :func:`selectkit._io.output_set`): the
files are written into a hidden staging folder and moved in only when every
one of them is complete, so a failure or a kill part-way leaves the previous
set whole rather than a new CSV beside an old report.
"""

from __future__ import annotations

from pathlib import Path

__all__ = ["OUTPUT_NAMES", "write_outputs"]

#: File names written by :func:`write_outputs`, by label.
OUTPUT_NAMES = {
    "shortlist_csv": "shortlist.csv",
    "models_csv": "models.csv",
    "shortlist_json": "shortlist.json",
    "report_html": "report.html",
}


def write_outputs(folder, *, settings, candidates, founds, shortlist, diagnoses, stability=None,
                  honest=None, split=None, scales=None) -> dict:
    """Write ``shortlist.csv`` (answers), ``models.csv`` (models), ``shortlist.json`` and ``report.html`` into ``folder``.

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
        Label (``shortlist_csv``, ``models_csv``, ``shortlist_json``, ``report_html``) → Path of the file written.

    Raises
    ------
    InputError
        If the JSON document would not follow the shipped schema (a bug, reported rather than written).
    """
    from .._io import output_set
    from . import html, tables

    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    founds = list(founds or ())
    diagnoses = list(diagnoses or ())
    document = tables.shortlist_document(shortlist=shortlist, candidates=candidates, settings=settings,
                                         founds=founds, diagnoses=diagnoses, stability=stability, honest=honest,
                                         split=split)
    tables.check_document(document)
    # One set: every file is written into a staging folder first and moved in only when all are there.
    with output_set(folder) as stage:
        paths = {
            "shortlist_csv": tables.write_csv(stage / OUTPUT_NAMES["shortlist_csv"], shortlist),
            "models_csv": tables.write_models_csv(stage / OUTPUT_NAMES["models_csv"], shortlist),
            "shortlist_json": tables.write_json(stage / OUTPUT_NAMES["shortlist_json"], document),
        }
        paths["report_html"] = html.write_html(
            stage / OUTPUT_NAMES["report_html"], shortlist=shortlist, settings=settings, candidates=candidates,
            founds=founds, diagnoses=diagnoses, stability=stability, honest=honest, split=split, scales=scales,
        )
    return {label: folder / Path(path).name for label, path in paths.items()}
