"""The command line: the only module that prints for a person or exits.

Commands::

    selectkit search TABLE --response COL [options]   search, rank, check, write the shortlist and report
    selectkit forms TABLE --response COL              list the candidate terms a table gives
    selectkit demo [--out FOLDER]                     the whole job on the bundled greenhouse data
    selectkit job new TABLE -o job.toml               write a commented starter job file
    selectkit job run job.toml                        run (or continue) an overnight job
    selectkit job resume FOLDER                       continue an interrupted job from its run store
    selectkit job status FOLDER                       progress of a job, readable from another shell

Bad input ends with one line on standard error and exit code 2 (no traceback
unless ``--debug``); an interrupt exits with 130 after the unit in hand. Option
names must be written in full (no abbreviations: ``--fold`` is refused rather
than taken for ``--folds``). Output closed early by the reader (``| head``) ends
quietly with 141, as a tool stopped by SIGPIPE does. Warnings of the libraries
underneath are shown as one plain line each (with ``--debug``: as Python shows
them, with their source). Names from the user's files are printed with their
control characters escaped (``\\x1b``), so a column name cannot drive the terminal.
"""

from __future__ import annotations

import argparse
import math
import os
import sys
import time
import warnings
from pathlib import Path

from . import __version__
from .errors import SelectkitError

__all__ = ["main", "build_parser"]

EXIT_BAD_INPUT = 2
EXIT_INTERNAL = 1
EXIT_INTERRUPTED = 130
EXIT_BROKEN_PIPE = 141  # 128 + SIGPIPE: what a shell reports for a tool whose reader went away


def _printable(text) -> str:
    from .report.text import printable

    return printable(text)


def _show(text="", *, file=None) -> None:
    """Print ``text`` for a person: its own line breaks kept, every other control character escaped."""
    print("\n".join(_printable(line) for line in str(text).split("\n")), file=file or sys.stdout, flush=True)


class _Parser(argparse.ArgumentParser):
    """argparse with whole option names only and errors on one line.

    Abbreviations are off (``allow_abbrev=False``) for this parser and, through ``parser_class``, every
    subparser: a typo such as ``--fold`` or ``--see`` is refused instead of silently meaning ``--folds`` or
    ``--seed``. A usage error is one line on standard error and exit code 2, like every other bad input.
    """

    def __init__(self, *args, **kwargs):
        kwargs.setdefault("allow_abbrev", False)
        super().__init__(*args, **kwargs)

    def error(self, message):
        self.exit(EXIT_BAD_INPUT, f"{_printable(self.prog)}: error: {_printable(message)} "
                                  f"(see {_printable(self.prog)} --help)\n")


def _whole_number(least: int, meaning: str, *, also=None):
    """An argparse type: a whole number of at least ``least`` (or exactly ``also``), else a one-line refusal."""
    def convert(text: str) -> int:
        try:
            value = int(text)
        except ValueError:
            raise argparse.ArgumentTypeError(f"{text!r} is not a whole number; give {meaning}") from None
        if value < least and value != also:
            raise argparse.ArgumentTypeError(f"{value} is too small; give {meaning}")
        return value

    return convert


def _number_at_least(least: float, meaning: str, *, strictly: bool = False):
    """An argparse type: a finite number ``>= least`` (``> least`` when ``strictly``), else a refusal."""
    def convert(text: str) -> float:
        try:
            value = float(text)
        except ValueError:
            raise argparse.ArgumentTypeError(f"{text!r} is not a number; give {meaning}") from None
        if not math.isfinite(value) or value < least or (strictly and value == least):
            raise argparse.ArgumentTypeError(f"{text} is out of range; give {meaning}")
        return value

    return convert


class _Renamed(argparse.Action):
    """A former option: refused with the spelling that replaced it (held in ``metavar``)."""

    def __call__(self, parser, namespace, values, option_string=None):
        parser.error(f"{option_string} was renamed; did you mean {self.metavar}?")


def _convention_name(text: str) -> str:
    """An argparse type: a parameter-count convention, a former name refused with the new one."""
    from .criteria import RENAMED_CONVENTIONS

    if text in RENAMED_CONVENTIONS:
        raise argparse.ArgumentTypeError(f"{text!r} was renamed; did you mean {RENAMED_CONVENTIONS[text]!r}?")
    return text


def _method_name(text: str) -> str:
    """An argparse type: a search method, a former name refused with the new one."""
    from .searches._adapters import RENAMED_METHODS

    if text in RENAMED_METHODS:
        raise argparse.ArgumentTypeError(f"method {text!r} was renamed; did you mean {RENAMED_METHODS[text]!r}?")
    return text


_TOP = _whole_number(1, "at least 1 model")
_FOLDS = _whole_number(2, "at least 2 folds")
_RESAMPLES = _whole_number(0, "0 (skip) or a positive number of resamples")
_OUTER_FOLDS = _whole_number(2, "0 (skip) or at least 2 outer folds", also=0)
_WORKERS = _whole_number(1, "a positive number of worker processes, or -1 for every core", also=-1)
_SEED = _whole_number(0, "a seed of 0 or more")
_DELTA = _number_at_least(0.0, "a distance of 0 or more")
_SECONDS = _number_at_least(0.0, "a positive number of seconds", strictly=True)


def _csv_list(text: str) -> list[str]:
    return [part.strip() for part in text.split(",") if part.strip()]


def _add_table_roles(p: argparse.ArgumentParser) -> None:
    p.add_argument("table", help="CSV or Parquet file (delimiter, decimal mark and encoding are detected)")
    p.add_argument("-r", "--response", required=True, help="name of the response column")
    p.add_argument("--only", type=_csv_list, metavar="COL,COL", default=None,
                   help="use only these columns as predictors (default: every other column)")
    p.add_argument("--keep-in", type=_csv_list, metavar="COL,COL", default=[],
                   help="predictors every model must hold (in some form)")
    p.add_argument("--leave-out", type=_csv_list, metavar="COL,COL", default=[],
                   help="columns that are not predictors")
    p.add_argument("--row-weights", metavar="COL", default=None, help="column of positive row weights")
    p.add_argument("--drop-incomplete-rows", action="store_true",
                   help="drop rows with missing values (default: refuse and list them)")
    p.add_argument("--keep-id-columns", type=_csv_list, metavar="COL,COL", default=[],
                   help="keep these identifier-like columns as predictors (excluded by default)")
    p.add_argument("--decimal-mark", choices=(".", ",", "point", "comma"), default=None,
                   help="decimal mark of a CSV table (default: decided from its numbers; the other mark is "
                        "then read as grouping thousands)")
    p.add_argument("--forms", type=_csv_list, metavar="FORM,FORM", default=None,
                   help="forms of each numeric predictor: identity, log, sqrt, reciprocal, square, "
                        "boxcox, boxtidwell (default: all of them)")
    p.add_argument("--fractional-powers", action="store_true",
                   help="also try the fractional-polynomial powers -2, -1, -0.5, 0, 0.5, 1, 2, 3")
    p.add_argument("--shift", action="append", default=[], metavar="COL=C",
                   help="allow log/sqrt/reciprocal of COL + C (C a number, or 'auto'); repeatable")
    p.add_argument("--prefer", type=_csv_list, metavar="COL,COL", default=[],
                   help="variables to keep when they nearly duplicate another or sit in a nearly collinear group")
    p.add_argument("--all-forms", action="store_true",
                   help="offer every curved form of every predictor, not only of those that bend once the "
                        "other predictors are in the fit (t^2 > log n)")
    p.add_argument("--keep-twins", action="store_true",
                   help="do not set aside near-duplicate variables (|r| >= 0.999) or members of a collinear "
                        "group (VIF >= 1000)")
    p.add_argument("--pairwise-products", action="store_true",
                   help="add every pairwise product x*z of numeric predictors (hierarchy kept)")
    p.add_argument("--response-form", default=None, metavar="FORM",
                   help="transform the response: log, sqrt or boxcox:LAMBDA")


def _add_search_options(p: argparse.ArgumentParser) -> None:
    from .api import AIMS, METHODS
    from .criteria import CONVENTIONS

    p.add_argument("-m", "--method", action="append", dest="methods", choices=METHODS, default=None,
                   type=_method_name,
                   help="search to run (repeatable; findings are pooled). Default: auto = exact best subset "
                        "when the terms are few enough, else screen -> exact -> stepwise polish")
    p.add_argument("--aim", choices=AIMS, default="explain",
                   help="explain: rank by BIC (find the terms that matter); predict: rank by AICc")
    p.add_argument("--rank-by", default=None, metavar="CRITERION",
                   help="rank by this criterion instead: aic, aicc, bic, cp, adj_r2, press, cv_mse")
    p.add_argument("--count-parameters", dest="convention", choices=CONVENTIONS, default="sigma-counted",
                   type=_convention_name,
                   help="what AIC/BIC count: sigma-counted = k coefficients + the error variance (default), "
                        "coefficients-only = k; rankings are unchanged")
    p.add_argument("--statsmodels-convention", nargs=0, action=_Renamed, help=argparse.SUPPRESS,
                   default=argparse.SUPPRESS, metavar="--count-parameters coefficients-only")
    p.add_argument("--top", type=_TOP, default=10, metavar="N", help="models in the shortlist (default 10)")
    p.add_argument("--within-delta", type=_DELTA, default=None, metavar="D",
                   help="keep only models within D of the best by the ranking criterion")
    p.add_argument("--folds", type=_FOLDS, default=5, metavar="K", help="folds for cross-validated error (default 5)")
    p.add_argument("--resamples", type=_RESAMPLES, default=0, metavar="B",
                   help="bootstrap resamples for the stability of the selection (default 0: skip)")
    p.add_argument("--honest-error", type=_OUTER_FOLDS, default=0, metavar="K",
                   help="also estimate the honest error of the whole procedure by repeating it inside K outer "
                        "folds (costs K more searches; default 0: skip)")
    p.add_argument("--rows-in-time-order", action="store_true",
                   help="row order means time or sequence (enables the Durbin-Watson check, blocked folds)")
    p.add_argument("--workers", type=_WORKERS, default=1, metavar="N", help="worker processes (-1: all cores)")
    p.add_argument("--backend", default="loky", help="joblib backend: loky, threading, multiprocessing, dask")
    p.add_argument("--scheduler", default=None, metavar="ADDRESS", help="Dask scheduler address for --backend dask")
    p.add_argument("--scheduler-timeout", type=_number_at_least(0, "a positive number of seconds", strictly=True),
                   default=10.0, metavar="SECONDS",
                   help="how long to wait for the Dask scheduler to answer before any work (default 10)")
    p.add_argument("--seed", type=_SEED, default=0, help="seed of every random draw (default 0)")
    p.add_argument("--time-budget", type=_SECONDS, default=None, metavar="SECONDS",
                   help="stop searching after this long and report the best found (marked not proven exact)")


def build_parser() -> argparse.ArgumentParser:
    parser = _Parser(
        prog="selectkit",
        allow_abbrev=False,
        description="Find which predictors, in which forms, give a defensible linear regression model.",
        epilog="Cautions: p-values of a selected model are optimistic; association is not causation; "
               "the decision rests with the practitioner.",
    )
    parser.add_argument("--version", action="version", version=f"selectkit {__version__}")
    parser.add_argument("--debug", action="store_true", help="show the full traceback on errors")
    commands = parser.add_subparsers(dest="command", metavar="COMMAND")
    # --debug is accepted after the command too; SUPPRESS keeps the top-level value when absent.
    common = _Parser(add_help=False, allow_abbrev=False)
    common.add_argument("--debug", action="store_true", default=argparse.SUPPRESS,
                        help="show the full traceback on errors")

    p = commands.add_parser("search", parents=[common], help="search a table, write the shortlist and the report",
                            description="Search for the best linear models of a response and write the "
                                        "shortlist (CSV, JSON) and a self-contained HTML report.")
    _add_table_roles(p)
    _add_search_options(p)
    p.add_argument("-o", "--out", default="selectkit-output", metavar="FOLDER",
                   help="folder for the shortlist and the report (default: selectkit-output)")
    p.add_argument("--quiet", action="store_true", help="print nothing but errors")

    p = commands.add_parser("forms", parents=[common], help="list the candidate terms a table gives",
                            description="Read a table and list every candidate term (and every refused form, "
                                        "with the reason) without searching.")
    _add_table_roles(p)
    p.add_argument("--save", default=None, metavar="CSV", help="also write the list as CSV")

    p = commands.add_parser("demo", parents=[common], help="run the whole job on the bundled greenhouse data",
                            description="Run intake, candidates, search, ranking, checks and the report on "
                                        "the bundled invented greenhouse data.")
    p.add_argument("-o", "--out", default="selectkit-demo", metavar="FOLDER",
                   help="folder for the outputs (default: selectkit-demo)")
    p.add_argument("--workers", type=_WORKERS, default=1, metavar="N", help="worker processes (-1: all cores)")
    p.add_argument("--seed", type=_SEED, default=0, help="seed of every random draw (default 0)")

    job = commands.add_parser("job", parents=[common], help="overnight jobs: job files, run stores, resume, status",
                              description="Run long searches from a job file with a run store that survives "
                                          "interruptions.")
    jobs = job.add_subparsers(dest="job_command", metavar="JOB_COMMAND")
    j = jobs.add_parser("new", parents=[common], help="write a commented starter job file for a table")
    j.add_argument("table")
    j.add_argument("-o", "--out", default=None, metavar="JOB_FILE",
                   help="where to write it (default: the table's name with .toml, in this folder)")
    j.add_argument("-r", "--response", default=None)
    j.add_argument("--force", action="store_true", help="overwrite an existing job file")
    j = jobs.add_parser("run", parents=[common], help="run a job file (continues its run store if one exists)")
    j.add_argument("job_file")
    j.add_argument("--fresh", action="store_true",
                   help="start afresh: forget the units an existing run store holds")
    j.add_argument("--quiet", action="store_true", help="no progress bar or progress lines")
    j = jobs.add_parser("resume", parents=[common],
                        help="continue an interrupted job from its output folder or run store",
                        description="Continue a job from its run store. Only where and how long it runs may "
                                    "change; everything that decides what is found comes from the store.")
    j.add_argument("folder")
    j.add_argument("--workers", type=_WORKERS, default=None, metavar="N",
                   help="worker processes for the rest of the job (-1: all cores)")
    j.add_argument("--backend", default=None, help="joblib backend for the rest of the job (e.g. dask)")
    j.add_argument("--scheduler", default=None, metavar="ADDRESS", help="Dask scheduler address")
    j.add_argument("--scheduler-timeout", type=_number_at_least(0, "a positive number of seconds", strictly=True),
                   default=None, metavar="SECONDS", help="how long to wait for the Dask scheduler to answer")
    j.add_argument("--time-budget", default=None, metavar="DURATION",
                   help="new time budget from now: seconds or text such as 8h, 90m")
    j.add_argument("--quiet", action="store_true", help="no progress bar or progress lines")
    j = jobs.add_parser("status", parents=[common], help="show the progress of a job (safe while it runs)")
    j.add_argument("folder")
    return parser


# ---------------------------------------------------------------------------------------------------


def _response_form(text):
    if text is None:
        return None
    text = text.strip().lower()
    if text.startswith("boxcox:"):
        try:
            return ("boxcox", float(text.split(":", 1)[1]))
        except ValueError:
            raise SelectkitError(f"--response-form {text!r}: write boxcox:LAMBDA with a number, e.g. boxcox:0.5")
    return text


def _shifts(items):
    shifts = {}
    for item in items:
        if "=" not in item:
            raise SelectkitError(f"--shift {item!r}: write COL=C, e.g. --shift bay_age_years=1 or COL=auto")
        col, value = item.split("=", 1)
        value = value.strip()
        if value != "auto":
            try:
                value = float(value)
            except ValueError:
                raise SelectkitError(f"--shift {item!r}: C must be a number or 'auto'")
        shifts[col.strip()] = value
    return shifts


def _table_options(args) -> dict:
    return dict(
        response=args.response,
        predictors=args.only,
        forced=args.keep_in,
        exclude=args.leave_out,
        weights=args.row_weights,
        missing="drop" if args.drop_incomplete_rows else "refuse",
        keep_identifiers=args.keep_id_columns,
        decimal_mark=args.decimal_mark,
        forms=args.forms,
        fractional_polynomials=args.fractional_powers,
        shifts=_shifts(args.shift),
        interactions=args.pairwise_products,
        response_transform=_response_form(args.response_form),
        prefer=args.prefer,
        twin_limit=None if args.keep_twins else 0.999,
        vif_limit=None if args.keep_twins else 1000.0,
        curvature_test=not args.all_forms,
    )


def _search_options(args) -> dict:
    return dict(
        methods=tuple(args.methods or ("auto",)),
        aim=args.aim,
        criterion=args.rank_by,
        convention=args.convention,
        shortlist_size=args.top,
        max_delta=args.within_delta,
        folds=args.folds,
        stability=args.resamples,
        honest_folds=args.honest_error,
        time_ordered=args.rows_in_time_order,
        seed=args.seed,
        time_budget=args.time_budget,
    )


def _say(text: str = "", *, quiet: bool = False) -> None:
    if not quiet:
        _show(text)


def _search_and_write(setup, *, out, workers=1, backend="loky", scheduler=None, quiet=False):
    """Run the setup's searches (with a progress bar on a terminal), rank, check, write the outputs."""
    from tqdm import tqdm

    from . import api

    show = not quiet and sys.stderr.isatty()
    # with a time budget each search is planned just before it runs (to get what is left): no total up front
    total = None if setup.deadline is not None else len(api.unit_keys(setup))
    bar = tqdm(total=total, desc="searching", unit="unit", file=sys.stderr, disable=not show, leave=False)
    founds = api.run_methods(setup, n_jobs=workers, backend=backend, scheduler=scheduler,
                             on_unit=lambda key, result: bar.update(1))
    bar.close()
    extra = [what for what, wanted in (("bootstrap resamples", setup.settings["stability"]),
                                       ("outer folds for the honest error", setup.settings["honest_folds"]))
             if wanted]
    if show:
        print("ranking and checking the best models" + (f"; then {' and '.join(extra)}" if extra else ""),
              file=sys.stderr, flush=True)
    result = api.finish(setup, founds, n_jobs=workers, backend=backend, scheduler=scheduler)
    return result, result.write(out)


def _run_search(args) -> int:
    from . import api

    started = time.perf_counter()
    api.check_output_folder(args.out)  # settings that can be checked before any work, checked first
    api.check_run_options(n_jobs=args.workers, backend=args.backend, scheduler=args.scheduler,
                          timeout=args.scheduler_timeout)
    setup = api.prepare_search(args.table, **_table_options(args), **_search_options(args))
    for note in setup.dataset.report.notes:
        if note.kind in ("warning", "dropped"):
            _say(f"note: {note.message}", quiet=args.quiet)
    for refusal in setup.candidates.refused:
        if refusal.form == "every form":  # a whole variable left out of the search: say it here, not only in forms
            _say(f"note: {refusal.family} is not in the search: {refusal.reason}", quiet=args.quiet)
    _say(f"read {setup.dataset.n} rows; {len(setup.candidates.terms)} candidate terms from "
         f"{len(setup.candidates.families)} variables; running: {', '.join(r.name for r in setup.runs)}",
         quiet=args.quiet)
    result, paths = _search_and_write(setup, out=args.out, workers=args.workers, backend=args.backend,
                                      scheduler=args.scheduler, quiet=args.quiet)
    _say(result.summary(), quiet=args.quiet)
    for label, path in paths.items():
        _say(f"  {label}: {path}", quiet=args.quiet)
    _say(f"done in {time.perf_counter() - started:.1f} s", quiet=args.quiet)
    return 0


def _run_forms(args) -> int:
    from . import candidates as _candidates
    from . import data as _data

    opts = _table_options(args)
    build = {k: opts.pop(k) for k in ("fractional_polynomials", "shifts", "interactions", "response_transform",
                                     "prefer", "twin_limit", "vif_limit", "curvature_test")}
    forms = opts.pop("forms")
    if forms is not None:
        build["forms"] = tuple(forms)
    dataset = _data.prepare(args.table, **opts)
    cands = _candidates.build_candidates(dataset, **build)
    for note in dataset.report.notes:
        _show(f"note: {note.message}")
    for note in cands.notes:
        _show(f"note: {note}")
    table = cands.describe()
    import pandas as pd

    # Escape the names cell by cell (not the printed lines) so that the columns stay aligned.
    shown = table.rename(columns=_printable)
    for column in shown.columns[shown.dtypes == object]:
        shown[column] = shown[column].map(lambda v: _printable(v) if isinstance(v, str) else v)
    with pd.option_context("display.max_rows", None, "display.width", 160, "display.max_colwidth", 60):
        _show(shown.to_string(index=False))
    print(f"{len(cands.terms)} terms in {len(cands.families)} families, {cands.matrix.shape[1]} columns, "
          f"{dataset.n} rows")
    if args.save:
        from ._io import atomic_write_text

        from .report.tables import csv_text

        atomic_write_text(Path(args.save), csv_text(table))  # formula-safe, as every CSV selectkit writes
        _show(f"wrote {args.save}")
    return 0


def _run_demo(args) -> int:
    import pandas as pd

    from . import api
    from .demo import RESPONSE, TRUE_EQUATION, demo_csv_path, make_greenhouse, recovery

    path = demo_csv_path()
    data = pd.read_csv(path) if path is not None else make_greenhouse()
    where = str(path) if path is not None else "generated in memory (fixed seed)"
    print(f"demo: invented greenhouse data, {len(data)} bay-seasons, {data.shape[1] - 1} measurements ({where})")
    print(f"demo: the data were generated from: {TRUE_EQUATION}")
    started = time.perf_counter()
    setup = api.prepare_search(data, response=RESPONSE, seed=args.seed, honest_folds=5)
    print(f"demo: {len(setup.candidates.terms)} candidate terms; running {', '.join(r.name for r in setup.runs)}")
    result, paths = _search_and_write(setup, out=args.out, workers=args.workers)
    _show(result.summary())
    found = recovery(result)
    if not found.missing_variables and not found.extra_variables:
        print("demo: the top answer holds exactly the generating variables.")
    else:
        print(f"demo: the top answer differs from the generating variables: missing "
              f"{list(found.missing_variables) or 'none'}, extra {list(found.extra_variables) or 'none'}")
    if found.best_is_truth:
        print("demo: its best model is exactly the generating model.")
    elif found.forms_offered:
        where = f" (model {found.model_position} of the model-level list)" if found.model_position else ""
        print("demo: the generating forms are among the top answer's forms within Δ ≤ 2: the data cannot tell "
              f"them from its best forms{where}.")
    else:
        print(f"demo: generating form(s) not among the top answer's forms: {', '.join(found.forms_not_offered)}")
    for label, p in paths.items():
        _show(f"  {label}: {p}")
    print(f"demo: done in {time.perf_counter() - started:.1f} s")
    return 0


def _run_job(args) -> int:
    from . import jobs

    if args.job_command == "new":
        out = Path(args.out) if args.out else Path(Path(args.table).stem + ".toml")
        if out.exists() and not args.force:
            raise SelectkitError(f"{out} exists; choose another name with -o or pass --force to overwrite")
        from ._io import atomic_write_text

        atomic_write_text(out, jobs.starter_job(args.table, response=args.response, job_file=out))
        _show(f"wrote {out}; fill in what it asks, then: selectkit job run {out}")
        return 0
    if args.job_command == "run":
        outcome = jobs.run_job(args.job_file, resume=not args.fresh, progress=False if args.quiet else None)
    elif args.job_command == "resume":
        given = {key: getattr(args, key) for key in ("workers", "backend", "scheduler", "scheduler_timeout",
                                                     "time_budget")
                 if getattr(args, key) is not None}
        outcome = jobs.resume_job(args.folder, progress=False if args.quiet else None, **given)
    elif args.job_command == "status":
        _show(jobs.store_status(args.folder).render())
        return 0
    else:
        raise SelectkitError("name a job command: new, run, resume or status (see selectkit job --help)")
    _show(outcome.render())
    return 0 if outcome.complete else 3


#: What a kind of warning means for the person reading it, when its own text does not say.
_WARNING_MEANINGS = (
    (RuntimeWarning, "a numerical step met a value it could not use, such as a zero, a negative number or an "
                     "overflow; results it touched may be missing or less precise"),
    ((FutureWarning, DeprecationWarning, PendingDeprecationWarning),
     "a library announces a change in a later version; these results are not affected"),
)


def _warning_source(filename: str) -> str:
    """The library a warning came from (``numpy``, ``statsmodels``...), not its source path."""
    parts = Path(str(filename)).parts
    for marker in ("site-packages", "dist-packages"):
        if marker in parts and parts.index(marker) + 1 < len(parts):
            return Path(parts[parts.index(marker) + 1]).stem
    return "selectkit" if "selectkit" in parts else "Python"


def _plain_warnings():
    """A ``warnings.showwarning`` that prints each distinct warning once, as one plain line on stderr."""
    seen = set()

    def show(message, category, filename, lineno, file=None, line=None):
        text = " ".join(str(message).split())
        if (category, text) in seen:
            return
        seen.add((category, text))
        meaning = next((m for kinds, m in _WARNING_MEANINGS if issubclass(category, kinds)), None)
        print(_printable(f"selectkit: warning from {_warning_source(filename)}: {text}"
                         + (f" ({meaning})" if meaning else "")), file=sys.stderr, flush=True)

    return show


def _quiet_after_broken_pipe() -> None:
    """Point standard output at the null device so that Python's own flush at exit cannot fail again."""
    try:
        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, sys.stdout.fileno())
    except (AttributeError, OSError, ValueError):  # no real file descriptor (an embedding, a test's capture)
        pass


def main(argv=None) -> int:
    """Run the command line; return the exit code."""
    try:
        return _main(argv)
    except BrokenPipeError:  # the reader went away (`selectkit job status | head`): stop quietly
        _quiet_after_broken_pipe()
        return EXIT_BROKEN_PIPE


def _main(argv) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    if args.command is None:
        parser.print_help()
        return EXIT_BAD_INPUT
    with warnings.catch_warnings():  # restores Python's own warning display afterwards
        if not args.debug:
            warnings.showwarning = _plain_warnings()
        return _run_command(args)


def _run_command(args) -> int:
    handlers = {"search": _run_search, "forms": _run_forms, "demo": _run_demo, "job": _run_job}
    try:
        return handlers[args.command](args)
    except SelectkitError as err:
        if args.debug:
            raise
        print(f"selectkit: error: {_printable(err)}", file=sys.stderr)
        return EXIT_BAD_INPUT
    except KeyboardInterrupt:
        print("selectkit: interrupted", file=sys.stderr)
        return EXIT_INTERRUPTED
    except BrokenPipeError:
        raise
    except Exception as err:  # an internal fault: one line, and how to see more
        if args.debug:
            raise
        print(f"selectkit: internal error ({type(err).__name__}: {_printable(err)}); rerun with --debug for "
              "the traceback", file=sys.stderr)
        return EXIT_INTERNAL
