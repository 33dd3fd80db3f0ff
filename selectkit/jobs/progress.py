"""Progress of a running job: a tqdm bar on a terminal, plain lines elsewhere, or a callable."""

from __future__ import annotations

import math
import sys
import time
from dataclasses import dataclass

from ..errors import OptionError

__all__ = ["JobProgress", "StageShow", "format_seconds", "make_reporter", "stage_show_for"]


@dataclass(frozen=True)
class JobProgress:
    """A snapshot handed to a progress callable after each finished unit.

    Attributes
    ----------
    units_done, units_total : int
        Units finished (including those finished by earlier runs) and planned.
    models_evaluated : int
        Models scored by the finished units, as far as their results say.
    elapsed : float
        Seconds since this run started.
    eta : float or None
        Estimated seconds left, from this run's pace (None before the first unit).
    key : str
        Key of the unit that just finished.
    """

    units_done: int
    units_total: int
    models_evaluated: int
    elapsed: float
    eta: float | None
    key: str


def format_seconds(seconds: float | None) -> str:
    """``3725`` → ``"1h 2m 5s"``."""
    if seconds is None or not math.isfinite(seconds):
        return "unknown"
    if seconds < 1:
        return f"{seconds:.2g}s"
    seconds = int(round(seconds))
    hours, rest = divmod(seconds, 3600)
    minutes, secs = divmod(rest, 60)
    if hours:
        return f"{hours}h {minutes}m {secs}s"
    if minutes:
        return f"{minutes}m {secs}s"
    return f"{secs}s"


class _Reporter:
    def __init__(self, name, total, initial, initial_models, started):
        self.name = name
        self.total = total
        self.done = initial
        self.initial = initial
        self.models = initial_models
        self.started = started

    def snapshot(self, key) -> JobProgress:
        elapsed = time.monotonic() - self.started
        new = self.done - self.initial
        eta = elapsed / new * (self.total - self.done) if new > 0 else None
        return JobProgress(self.done, self.total, self.models, elapsed, eta, key)

    def unit(self, key, models):
        self.done += 1
        self.models += models or 0
        self.show(self.snapshot(key))

    def show(self, snap: JobProgress):
        pass

    def close(self):
        pass


class _CallbackReporter(_Reporter):
    def __init__(self, callback, *args):
        super().__init__(*args)
        self.callback = callback

    def show(self, snap):
        self.callback(snap)


class _LineReporter(_Reporter):
    """Plain lines on standard error, at most one per ``interval`` seconds (and one at the end)."""

    def __init__(self, *args, interval: float = 30.0, stream=None):
        super().__init__(*args)
        self.interval = interval
        self.stream = stream if stream is not None else sys.stderr
        self.last_line = -math.inf
        self.snap = None
        self.written = None

    def show(self, snap):
        self.snap = snap
        if time.monotonic() - self.last_line >= self.interval:
            self._write(snap)

    def _write(self, snap):
        self.last_line = time.monotonic()
        self.written = snap
        self.stream.write(f"[{time.strftime('%H:%M:%S')}] job {self.name}: {snap.units_done}/{snap.units_total} "
                          f"units, {snap.models_evaluated:,} models, {format_seconds(snap.elapsed)} elapsed, "
                          f"about {format_seconds(snap.eta)} left\n")
        self.stream.flush()

    def close(self):
        # A last line with the final count, unless the last line written already shows it.
        if self.written is None or self.written.units_done != self.done:
            self._write(self.snap if self.snap is not None else self.snapshot(""))


class _BarReporter(_Reporter):
    def __init__(self, *args):
        super().__init__(*args)
        from tqdm.auto import tqdm

        self.bar = tqdm(total=self.total, initial=self.done, unit="unit", desc=f"job {self.name}",
                        file=sys.stderr, dynamic_ncols=True)
        self.bar.set_postfix_str(f"{self.models:,} models")

    def show(self, snap):
        self.bar.update(1)
        self.bar.set_postfix_str(f"{snap.models_evaluated:,} models", refresh=False)

    def close(self):
        self.bar.close()


def make_reporter(progress, name, *, total, initial, initial_models, started) -> _Reporter:
    args = (name, total, initial, initial_models, started)
    if progress is False:
        return _Reporter(*args)
    if callable(progress):
        return _CallbackReporter(progress, *args)
    if progress is None:
        progress = "bar" if _stderr_is_terminal() else "lines"
    if progress == "bar":
        return _BarReporter(*args)
    if progress == "lines":
        return _LineReporter(*args)
    raise OptionError(f"unknown progress {progress!r}; choose None (automatic), False, 'bar', 'lines' "
                      f"or a callable")


def _stderr_is_terminal() -> bool:
    try:
        return sys.stderr.isatty()
    except (AttributeError, ValueError):
        return False


class StageShow:
    """Shows the stages after the search as :mod:`selectkit._stages` reports them.

    ``mode`` ``"bar"``: one tqdm bar per stage (ranking, resamples, outer
    folds, checks, report), closed when the next starts; ``"lines"``: a
    line when a stage starts, at most one per ``interval`` seconds while it
    runs, and one when it ends; ``None``: nothing shown.  ``log`` (a
    callable taking a line) also hears each stage's start and end, as a job
    writes them in its log.
    """

    def __init__(self, mode=None, *, prefix: str = "", stream=None, interval: float = 30.0, log=None):
        self.mode = mode
        self.prefix = prefix
        self.stream = stream if stream is not None else sys.stderr
        self.interval = interval
        self.log = log
        self.stage = None
        self.bar = None
        self.began = self.last = 0.0

    def __call__(self, stage: str, done: int, total: int) -> None:
        if stage != self.stage:
            self.close()
            self.stage, self.began, self.last = stage, time.monotonic(), time.monotonic()
            if self.log is not None:
                self.log(f"{stage}: {done} of {total}")
            if self.mode == "bar":
                from tqdm.auto import tqdm

                self.bar = tqdm(total=total, initial=done, desc=f"{self.prefix}{stage}", file=self.stream,
                                leave=False, dynamic_ncols=True)
            elif self.mode == "lines":
                self._line(f"{stage}: {done} of {total}")
            if done < total:
                return
        if self.bar is not None:
            self.bar.n = done
            self.bar.refresh()
        elif self.mode == "lines" and done < total and time.monotonic() - self.last >= self.interval:
            self._line(f"{stage}: {done} of {total}")
        if done >= total:
            seconds = time.monotonic() - self.began
            if self.log is not None:
                self.log(f"{stage}: done in {format_seconds(seconds)}")
            if self.mode == "lines":
                self._line(f"{stage}: done ({total}) in {format_seconds(seconds)}")

    def _line(self, text: str) -> None:
        self.last = time.monotonic()
        self.stream.write(f"[{time.strftime('%H:%M:%S')}] {self.prefix}{text}\n")
        self.stream.flush()

    def close(self) -> None:
        if self.bar is not None:
            self.bar.close()
            self.bar = None


def stage_show_for(progress, *, prefix: str = "", log=None) -> StageShow:
    """The :class:`StageShow` matching a job's ``progress`` option (a callable hears units only)."""
    if progress is None:
        progress = "bar" if _stderr_is_terminal() else "lines"
    mode = progress if progress in ("bar", "lines") else None
    return StageShow(mode, prefix=prefix, log=log)
