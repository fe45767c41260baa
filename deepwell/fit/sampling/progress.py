"""Progress of one chain or ensemble: a tqdm bar, log lines, or nothing.

A bar must not promise what the run will not do.  Three cases:

* a fixed number of steps: ``k/N steps`` with tqdm's rate and time left;
* a run to a stop rule (``open_ended``): the step count is only an upper
  bound, so no percentage or time left is shown, only ``k steps (at most N;
  stops when converged)``;
* a time limit (``max_time``): the bar measures time against the limit, so
  its "time left" can never exceed what remains of the limit; the steps are
  shown beside it.

When stderr is not a terminal (a log file, a pipe) a tqdm bar would write a
carriage return and a redrawn bar at every step, so :class:`LineProgress`
writes a plain log line (logger ``deepwell``) every 5% of the run instead.
"""

import logging
import math
import sys
import time

__all__ = ["NoProgress", "LineProgress", "TimedBar", "make_progress"]

log = logging.getLogger("deepwell")


class NoProgress:
    """Do-nothing stand-in for a tqdm bar (same methods, no output)."""

    def update(self, n=1):
        pass

    def set_postfix_str(self, text, refresh=True):
        pass

    def close(self):
        pass


def _bound_note(total, open_ended):
    return f"at most {total}; stops when converged" if open_ended else ""


class LineProgress:
    """Progress as plain log lines: one line every ``every`` of the run.

    Parameters
    ----------
    total : int
        Steps of the whole run (an upper bound when ``open_ended``).
    initial : int
        Steps already done (a resumed run).
    desc : str
        Name of the chain or ensemble, starting every line.
    every : float
        Fraction of the run between two lines (default 5%): of the steps, or
        of ``max_time`` when a time limit is given.
    max_time : float, optional
        Time limit of the run (s); lines then count time against it.
    open_ended : bool
        The run stops earlier when it has converged: no percentage of steps.
    """

    def __init__(self, total, initial=0, desc="sampling", every=0.05, max_time=None,
                 open_ended=False):
        self.total, self.n, self.desc = max(int(total), 1), int(initial), desc
        self.stride = max(1, math.ceil(every * self.total))
        self.max_time, self.open_ended = max_time, bool(open_ended)
        self.time_stride = None if max_time is None else every * float(max_time)
        self.postfix = ""
        self.shown = self.n
        self.t0 = time.monotonic()
        self.next_time = self.time_stride

    def _line(self):
        extra = f", {self.postfix}" if self.postfix else ""
        elapsed = time.monotonic() - self.t0
        if self.max_time is not None:
            log.info("%s: %d steps, %.0f s of the %.0f s limit (%.0f%%)%s", self.desc, self.n,
                     elapsed, self.max_time, 100.0 * min(elapsed / self.max_time, 1.0), extra)
        elif self.open_ended:
            log.info("%s: %d steps (%s), %.0f s%s", self.desc, self.n,
                     _bound_note(self.total, True), elapsed, extra)
        else:
            log.info("%s: %d/%d steps (%.0f%%), %.0f s%s", self.desc, self.n, self.total,
                     100.0 * self.n / self.total, elapsed, extra)
        self.shown = self.n

    def update(self, n=1):
        before = self.n // self.stride
        self.n += n
        if self.time_stride is not None:
            if time.monotonic() - self.t0 >= self.next_time:
                self.next_time += self.time_stride
                self._line()
        elif self.n // self.stride > before:
            self._line()

    def set_postfix_str(self, text, refresh=True):
        self.postfix = text

    def close(self):
        if self.n != self.shown:
            self._line()


class TimedBar:
    """A tqdm bar of time against a limit, with the steps shown beside it.

    Parameters
    ----------
    bar : tqdm.tqdm
        A bar whose ``total`` is the time limit in seconds.
    total : int
        Upper bound of the steps.
    initial : int
        Steps already done.
    """

    def __init__(self, bar, total, initial=0):
        self.bar, self.total, self.n = bar, int(total), int(initial)
        self.t0 = time.monotonic()
        self.postfix = ""

    def _text(self):
        extra = f", {self.postfix}" if self.postfix else ""
        return f"{self.n} steps (at most {self.total}){extra}"

    def update(self, n=1):
        self.n += n
        seen = min(time.monotonic() - self.t0, float(self.bar.total))
        if seen - self.bar.n >= 0.2:
            self.bar.set_postfix_str(self._text(), refresh=False)
            self.bar.update(seen - self.bar.n)

    def set_postfix_str(self, text, refresh=True):
        self.postfix = text

    def close(self):
        self.bar.set_postfix_str(self._text(), refresh=False)
        self.bar.close()


def make_progress(enabled, total, initial=0, desc="sampling", position=0, max_time=None,
                  open_ended=False):
    """Progress display of one chain or ensemble.

    Parameters
    ----------
    enabled : bool or object
        False: :class:`NoProgress`.  True: a tqdm bar when stderr is a
        terminal, else :class:`LineProgress`.  An object with the same
        interface is used as it is.
    total : int
        Steps of the run; an upper bound when ``open_ended`` or ``max_time``.
    initial : int
        Steps already done (a resumed run).
    desc : str
        Name of the chain or ensemble.
    position : int
        Line of the tqdm bar (one per chain).
    max_time : float, optional
        Time limit (s): the display measures time against it.
    open_ended : bool
        The run stops when converged: the display shows no percentage of steps
        and no time left.
    """
    if not enabled:
        return NoProgress()
    if not isinstance(enabled, bool):
        return enabled  # an object with the same interface, passed in
    if not (hasattr(sys.stderr, "isatty") and sys.stderr.isatty()):
        return LineProgress(total, initial=initial, desc=desc, max_time=max_time,
                            open_ended=open_ended)
    try:
        from tqdm.auto import tqdm
    except ImportError:  # pragma: no cover - tqdm is a dependency
        return NoProgress()
    if max_time is not None:
        bar = tqdm(total=float(max_time), desc=desc, position=position, leave=True,
                   dynamic_ncols=True,
                   bar_format="{desc}: {percentage:3.0f}% of the time limit |{bar}| "
                              "{elapsed} of " + f"{float(max_time):.0f} s" + "{postfix}")
        return TimedBar(bar, total, initial)
    if open_ended:
        bar = tqdm(total=None, initial=initial, desc=desc, position=position, leave=True,
                   unit="step", dynamic_ncols=True)
        return _NotedBar(bar, _bound_note(total, True))
    return tqdm(total=total, initial=initial, desc=desc, position=position, leave=True,
                unit="step", dynamic_ncols=True)


class _NotedBar:
    """A tqdm counter (no total) whose postfix always carries ``note``."""

    def __init__(self, bar, note):
        self.bar, self.note = bar, note
        self.bar.set_postfix_str(note, refresh=False)

    def update(self, n=1):
        self.bar.update(n)

    def set_postfix_str(self, text, refresh=True):
        self.bar.set_postfix_str(f"{self.note}, {text}" if text else self.note,
                                 refresh=refresh)

    def close(self):
        self.bar.close()
