"""Drawing a set of figures: in worker processes when that pays, with progress lines.

A figure job is a triple ``(stem, build, caption)``: ``build()`` returns a
:class:`matplotlib.figure.Figure`, which :func:`.style.save_figure` writes as
``folder/stem.<fmt>``.  :func:`draw_jobs` draws a list of them.

Matplotlib draws in one thread, and saving (PDF and PNG, each a full drawing
pass) is most of a report's figure time, so figures are drawn by up to
:data:`FIGURE_PROCESSES` forked worker processes, one figure per task.  Each
figure is built and saved whole inside one process by the same code as in the
calling process, so the files are byte for byte those of a serial run (fixed
metadata, no dates; tested).  Figures are drawn in the calling process instead
when there are fewer than :data:`PARALLEL_FIGURES`, when only one core is
usable, where processes cannot be forked, or when the calling process runs
other threads (forking a threaded process can deadlock the child).
"""

import logging
import multiprocessing
import os
import threading
import time
from concurrent.futures import ProcessPoolExecutor, as_completed
from concurrent.futures.process import BrokenProcessPool

from deepwell.core.text import plural

from .style import FORMATS, save_figure

__all__ = ["FIGURE_PROCESSES", "PARALLEL_FIGURES", "PROGRESS_SECONDS", "figure_processes",
           "draw_jobs"]

log = logging.getLogger("deepwell")

#: Most worker processes that draw figures at once (capped by the usable cores).
FIGURE_PROCESSES = 2
#: Fewer figures than this are drawn in the calling process: starting the
#: workers would cost about as much as it saves.
PARALLEL_FIGURES = 4
#: Seconds between two progress lines while figures are drawn; a drawing that
#: ends sooner prints no counter at all.
PROGRESS_SECONDS = 5.0

# The jobs of the drawing in progress, read by the forked workers (which inherit
# the calling process's memory, so the jobs' closures need not be pickled).
_PENDING = None


def _usable_cores():
    try:
        return len(os.sched_getaffinity(0))
    except AttributeError:  # not on every platform
        return os.cpu_count() or 1


def figure_processes(n_jobs, processes=None):
    """How many processes draw ``n_jobs`` figures (1: the calling process alone).

    Parameters
    ----------
    n_jobs : int
        Figures to draw.
    processes : int, optional
        Most processes wanted (default :data:`FIGURE_PROCESSES`); 1 draws in
        the calling process.

    Returns
    -------
    int
        At most the usable cores and ``n_jobs``; 1 below :data:`PARALLEL_FIGURES`
        figures, without the ``fork`` start method, or while other threads run.
    """
    n = min(FIGURE_PROCESSES if processes is None else int(processes), _usable_cores(), n_jobs)
    if (n < 2 or n_jobs < PARALLEL_FIGURES
            or "fork" not in multiprocessing.get_all_start_methods()
            or threading.active_count() > 1):
        return 1
    return n


def _draw_one(index):
    """Build and save job ``index`` of :data:`_PENDING` (in a worker or the caller)."""
    jobs, folder, formats = _PENDING
    stem, build, _ = jobs[index]
    return index, save_figure(build(), folder, stem, formats)


class _Counter:
    """Progress lines: ``figures: 5 of 16 drawn (12 s)`` every PROGRESS_SECONDS at most."""

    def __init__(self, n, say):
        self.n, self.done, self.say = n, 0, say
        self.start = self.last = time.monotonic()

    def step(self):
        self.done += 1
        now = time.monotonic()
        if (now - self.last >= PROGRESS_SECONDS
                or (self.done == self.n and now - self.start >= PROGRESS_SECONDS)):
            self.say(f"figures: {self.done} of {self.n} drawn ({now - self.start:.0f} s)")
            self.last = now


def _draw_here(indices, files, counter):
    for i in indices:
        files[i] = _draw_one(i)[1]
        counter.step()


def _draw_in_processes(indices, files, counter, n_processes):
    """Draw ``indices`` on ``n_processes`` forked workers; returns those not drawn."""
    left = set(indices)
    context = multiprocessing.get_context("fork")
    try:
        with ProcessPoolExecutor(n_processes, mp_context=context) as pool:
            futures = [pool.submit(_draw_one, i) for i in indices]
            try:
                for future in as_completed(futures):
                    i, paths = future.result()
                    files[i] = paths
                    left.discard(i)
                    counter.step()
            except BaseException:
                pool.shutdown(wait=True, cancel_futures=True)
                raise
    except (BrokenProcessPool, OSError) as exc:  # a worker died, or no process could start
        log.warning("figure workers failed (%s); drawing %s in this process", exc,
                    plural(len(left), "remaining figure"))
    return [i for i in indices if i in left]


def draw_jobs(jobs, folder, formats=FORMATS, processes=None, progress=None, first=()):
    """Build and save every figure job; return the files of each, in job order.

    Parameters
    ----------
    jobs : list of (str, callable, str)
        ``(stem, build, caption)``; ``build()`` returns a Figure.
    folder : Path
        Existing folder the files go to.
    formats : tuple of str
        File formats (see :func:`.style.save_figure`).
    processes : int, optional
        Most drawing processes (see :func:`figure_processes`).
    progress : callable, optional
        Called with one line before drawing and, on long drawings, with a
        counter every :data:`PROGRESS_SECONDS`.
    first : iterable of str
        Stems to start first (the slowest figures, so that no worker waits for
        one long figure at the end).

    Returns
    -------
    list of list of Path
        The files of ``jobs[i]`` at index i.
    """
    global _PENDING
    say = progress or (lambda text: None)
    first = set(first)
    order = ([i for i, job in enumerate(jobs) if job[0] in first]
             + [i for i, job in enumerate(jobs) if job[0] not in first])
    n_processes = figure_processes(len(jobs), processes)
    say(f"drawing {plural(len(jobs), 'figure')}"
        + (f" in {n_processes} processes" if n_processes > 1 else ""))
    files = [None] * len(jobs)
    counter = _Counter(len(jobs), say)
    _PENDING = (jobs, folder, tuple(formats))
    try:
        if n_processes > 1:
            order = _draw_in_processes(order, files, counter, n_processes)
        _draw_here(order, files, counter)
    finally:
        _PENDING = None
    return files
