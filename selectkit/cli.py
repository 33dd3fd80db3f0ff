"""The command line: the only module that prints for a person or exits.

Commands::

    selectkit search TABLE --response COL [options]   search, rank, check, write the shortlist and report
    selectkit forms TABLE --response COL              list the candidate terms a table gives
    selectkit demo [--output FOLDER]                  the whole job on the bundled greenhouse data
    selectkit job new TABLE -o job.toml               write a commented starter job file
    selectkit job run job.toml                        run (or continue) an overnight job
    selectkit job resume FOLDER                       continue an interrupted job from its run store
    selectkit job extend FOLDER                       add the rows of files that joined a job's table
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


class _Renamed(argparse.Action):
    """A former option: refused with the spelling that replaced it (held in ``metavar``)."""

    def __call__(self, parser, namespace, values, option_string=None):
        parser.error(f"{option_string} was renamed; did you mean {self.metavar}?")


def _setting_type(name: str):
    """An argparse type for the setting ``name``: its command-line text read, then checked as on every surface."""
    from . import settings

    setting = settings.BY_NAME[name]

    def convert(text: str):
        try:
            return setting.kind.check(setting.kind.parse(text))
        except settings.Refusal as why:
            raise argparse.ArgumentTypeError(str(why).removeprefix("= ")) from None

    convert.__name__ = name  # argparse names the type in its own messages
    return convert


def _add_settings(p: argparse.ArgumentParser, names, *, required=()) -> None:
    """One flag per setting of :mod:`selectkit.settings` (its name with dashes), with the table's help line.

    Only the settings given end up in the namespace (``default=SUPPRESS``): the
    rest take the table's defaults when the settings are resolved.
    """
    from . import settings

    for name in names:
        setting = settings.BY_NAME[name]
        flags = ([setting.short] if setting.short else []) + [setting.flag]
        default = "" if setting.required or "default" in setting.help else f" (default: {_default_text(setting)})"
        if setting.kind is settings.FLAG:
            p.add_argument(*flags, dest=name, action=argparse.BooleanOptionalAction, default=argparse.SUPPRESS,
                           help=setting.help + default)
        else:
            p.add_argument(*flags, dest=name, type=_setting_type(name), metavar=setting.metavar,
                           default=argparse.SUPPRESS, required=name in required, help=setting.help + default)


def _default_text(setting) -> str:
    if setting.default is None or setting.default in ((), {}):
        return "none"
    if isinstance(setting.default, bool):
        return "on" if setting.default else "off"
    return setting.kind.cli(setting.default) if not isinstance(setting.default, str) else setting.default


def _add_former_flags(p: argparse.ArgumentParser) -> None:
    """Hidden former flags of this command, each refused with its current spelling."""
    from . import settings

    taken = set(p._option_string_actions)
    for old, now in settings.FORMER[settings.CLI].items():
        if old not in taken:
            p.add_argument(old, nargs="?", action=_Renamed, metavar=now, help=argparse.SUPPRESS,
                           default=argparse.SUPPRESS)


def _given(args, names) -> dict:
    """The settings given on the command line, by name."""
    return {name: getattr(args, name) for name in names if hasattr(args, name)}


#: Settings of each command (in --help order).
_TABLE_SETTINGS = ("response", "predictors", "always_include", "leave_out", "row_weights", "incomplete_rows",
                   "keep_id_columns", "decimal_mark", "read_in_parts", "check_sample_rows", "time_ordered", "forms",
                   "fractional_polynomials", "shifts", "interactions", "response_form", "prefer", "twin_limit",
                   "vif_limit", "curvature_test")
_SEARCH_SETTINGS = _TABLE_SETTINGS + ("methods", "method_options", "exact_limit", "criterion", "aim",
                                      "parameter_count", "shortlist_size", "keep_within", "folds", "resamples",
                                      "honest_folds", "split_fraction", "seed", "workers", "backend", "scheduler",
                                      "scheduler_timeout", "time_budget", "detailed_answers", "output")
_RUN_SETTINGS = ("workers", "backend", "scheduler", "scheduler_timeout")


def build_parser() -> argparse.ArgumentParser:
    parser = _Parser(
        prog="selectkit",
        allow_abbrev=False,
        description="Find which predictors, in which forms, give a defensible linear regression model.",
        epilog="Every setting has the same name here (with dashes), in a job file and in selectkit.search(). "
               "Cautions: p-values of a selected model are optimistic; association is not causation; "
               "the decision rests with the practitioner.",
    )
    parser.add_argument("--version", action="version", version=f"selectkit {__version__}")
    parser.add_argument("--debug", action="store_true", help="show the full traceback on errors")
    commands = parser.add_subparsers(dest="command", metavar="COMMAND")
    # --debug is accepted after the command too; SUPPRESS keeps the top-level value when absent.
    common = _Parser(add_help=False, allow_abbrev=False)
    common.add_argument("--debug", action="store_true", default=argparse.SUPPRESS,
                        help="show the full traceback on errors")
    table_help = "CSV or Parquet file (delimiter, decimal mark and encoding are detected)"

    p = commands.add_parser("search", parents=[common], help="search a table, write the shortlist and the report",
                            description="Search for the best linear models of a response and write the "
                                        "shortlist (CSV, JSON) and a self-contained HTML report.")
    p.add_argument("table", help=table_help)
    _add_settings(p, _SEARCH_SETTINGS, required=("response",))
    p.add_argument("--quiet", action="store_true", help="print nothing but errors")
    _add_former_flags(p)

    p = commands.add_parser("forms", parents=[common], help="list the candidate terms a table gives",
                            description="Read a table and list every candidate term (and every refused form, "
                                        "with the reason) without searching.")
    p.add_argument("table", help=table_help)
    _add_settings(p, _TABLE_SETTINGS, required=("response",))
    p.add_argument("--save", default=None, metavar="CSV", help="also write the list as CSV")
    _add_former_flags(p)

    p = commands.add_parser("demo", parents=[common], help="run the whole job on the bundled greenhouse data",
                            description="Run intake, candidates, search, ranking, checks and the report on "
                                        "the bundled invented greenhouse data (outputs in selectkit-demo).")
    _add_settings(p, ("output", "workers", "seed"))
    _add_former_flags(p)

    job = commands.add_parser("job", parents=[common], help="overnight jobs: job files, run stores, resume, status",
                              description="Run long searches from a job file with a run store that survives "
                                          "interruptions.")
    jobs = job.add_subparsers(dest="job_command", metavar="JOB_COMMAND")
    j = jobs.add_parser("new", parents=[common], help="write a commented starter job file for a table")
    j.add_argument("table")
    j.add_argument("-o", "--output", default=None, metavar="JOB_FILE",
                   help="where to write the job file (default: the table's name with .toml, in this folder)")
    _add_settings(j, ("response",))
    j.add_argument("--force", action="store_true", help="overwrite an existing job file")
    _add_former_flags(j)
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
    _add_settings(j, _RUN_SETTINGS + ("time_budget",))
    j.add_argument("--quiet", action="store_true", help="no progress bar or progress lines")
    _add_former_flags(j)
    j = jobs.add_parser("extend", parents=[common],
                        help="add the rows of files that joined a job's table (a folder or glob) and rank again",
                        description="Read only the files that joined the job's table since its last run, add "
                                    "their rows to the stored moments (the forms chosen before are kept), and run "
                                    "the searches and the ranking again on all rows.")
    j.add_argument("folder")
    _add_settings(j, _RUN_SETTINGS + ("time_budget",))
    j.add_argument("--quiet", action="store_true", help="no progress bar or progress lines")
    _add_former_flags(j)
    j = jobs.add_parser("status", parents=[common], help="show the progress of a job (safe while it runs)")
    j.add_argument("folder")
    return parser


# ---------------------------------------------------------------------------------------------------


def _say(text: str = "", *, quiet: bool = False) -> None:
    if not quiet:
        _show(text)


def _search_and_write(setup, *, out, workers=1, backend="loky", scheduler=None, quiet=False):
    """Run the setup's searches (with a progress bar on a terminal), rank, check, write the outputs."""
    from tqdm import tqdm

    from . import api

    show = not quiet and sys.stderr.isatty()
    if not quiet:
        from .kernels import compiled_on_disk

        if not compiled_on_disk():
            print("first run: compiling the search kernels once (about a minute); later runs load them from the "
                  "cache", file=sys.stderr, flush=True)
    # with a time budget each search is planned just before it runs (to get what is left): no total up front
    total = None if setup.deadline is not None else len(api.unit_keys(setup))
    bar = tqdm(total=total, desc="searching", unit="unit", file=sys.stderr, disable=not show, leave=False)
    founds = api.run_methods(setup, n_jobs=workers, backend=backend, scheduler=scheduler,
                             on_unit=lambda key, result: bar.update(1))
    bar.close()
    # the stages after the search (ranking, resamples, outer folds, checks, report) get a bar each
    from . import _stages
    from .jobs.progress import StageShow

    stages = StageShow("bar" if show else None)
    try:
        with _stages.heard_by(stages):
            result = api.finish(setup, founds, n_jobs=workers, backend=backend, scheduler=scheduler)
            return result, result.write(out)
    finally:
        stages.close()


def _run_search(args) -> int:
    from . import api

    from . import settings

    started = time.perf_counter()
    given = _given(args, _SEARCH_SETTINGS)
    s = settings.resolve(given)  # every setting checked before any work
    api.check_output_folder(s["output"])
    api.check_run_options(n_jobs=s["workers"], backend=s["backend"], scheduler=s["scheduler"],
                          timeout=s["scheduler_timeout"])
    given.pop("output", None)
    setup = api.prepare_search(args.table, **given)
    for note in setup.dataset.report.notes:
        if note.kind in ("warning", "dropped"):
            _say(f"note: {note.message}", quiet=args.quiet)
    for refusal in setup.candidates.refused:
        if refusal.form == "every form":  # a whole variable left out of the search: say it here, not only in forms
            _say(f"note: {refusal.family} is not in the search: {refusal.reason}", quiet=args.quiet)
    parts = setup.candidates.parts
    rows = (f"{setup.dataset.n} rows" if parts is None else
            f"{parts.n_rows} rows in {parts.n_parts} part{'s' if parts.n_parts != 1 else ''}"
            + (f" (checks on a sample of {parts.sample_rows})" if parts.sample_rows < parts.n_used else ""))
    _say(f"read {rows}; {len(setup.candidates.terms)} candidate terms from "
         f"{len(setup.candidates.families)} variables; running: {', '.join(r.name for r in setup.runs)}",
         quiet=args.quiet)
    result, paths = _search_and_write(setup, out=s["output"], workers=s["workers"], backend=s["backend"],
                                      scheduler=s["scheduler"], quiet=args.quiet)
    _say(result.summary(), quiet=args.quiet)
    for label, path in paths.items():
        _say(f"  {label}: {path}", quiet=args.quiet)
    _say(f"done in {time.perf_counter() - started:.1f} s", quiet=args.quiet)
    return 0


def _run_forms(args) -> int:
    from . import api

    dataset, cands = api.prepare_candidates(args.table, **_given(args, _TABLE_SETTINGS))
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
    from . import settings

    s = settings.resolve(_given(args, ("output", "workers", "seed")), allowed=("output", "workers", "seed"))
    output = s["output"] if hasattr(args, "output") else "selectkit-demo"
    api.check_output_folder(output)
    setup = api.prepare_search(data, response=RESPONSE, seed=s["seed"], honest_folds=5)
    print(f"demo: {len(setup.candidates.terms)} candidate terms; running {', '.join(r.name for r in setup.runs)}")
    result, paths = _search_and_write(setup, out=output, workers=s["workers"])
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
        out = Path(args.output) if args.output else Path(Path(args.table).stem + ".toml")
        if out.exists() and not args.force:
            raise SelectkitError(f"{out} exists; choose another name with --output or pass --force to overwrite")
        from ._io import atomic_write_text

        atomic_write_text(out, jobs.starter_job(args.table, response=getattr(args, "response", None), job_file=out))
        _show(f"wrote {out}; fill in what it asks, then: selectkit job run {out}")
        return 0
    if args.job_command == "run":
        outcome = jobs.run_job(args.job_file, resume=not args.fresh, progress=False if args.quiet else None)
    elif args.job_command == "resume":
        given = _given(args, _RUN_SETTINGS + ("time_budget",))
        outcome = jobs.resume_job(args.folder, progress=False if args.quiet else None, **given)
    elif args.job_command == "extend":
        given = _given(args, _RUN_SETTINGS + ("time_budget",))
        outcome = jobs.extend_job(args.folder, progress=False if args.quiet else None, **given)
    elif args.job_command == "status":
        _show(jobs.store_status(args.folder).render())
        return 0
    else:
        raise SelectkitError("name a job command: new, run, resume, extend or status (see selectkit job --help)")
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
    from . import settings

    handlers = {"search": _run_search, "forms": _run_forms, "demo": _run_demo, "job": _run_job}
    try:
        with settings.speaking(settings.CLI):  # hints name flags, not keywords
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
