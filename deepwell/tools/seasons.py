"""Observing seasons and candidate epochs of a plan (Julian years; months as twelfths)."""

import numpy as np

from deepwell.core.errors import InputError

__all__ = ["parse_months", "season_intervals", "candidate_epochs"]


# ---------------------------------------------------------- candidate epochs
def parse_months(text):
    """Observable months from ``"3-9"``, ``"11-2"`` (wrapping) or ``"3,4,5"``."""
    out = []
    bad = InputError(f"months must be 1 to 12, written like 3-9, 11-2 or 3,4,5; got {text!r}",
                     column="--months")
    try:
        for part in str(text).split(","):
            ends = [int(x) for x in part.split("-")]
            if len(ends) > 2 or any(not 1 <= m <= 12 for m in ends):
                raise bad
            a, b = ends[0], ends[-1]
            out += [(a - 1 + i) % 12 + 1 for i in range((b - a) % 12 + 1)]
    except ValueError:
        raise bad from None
    return tuple(dict.fromkeys(out))


def _observable(t, months):
    """Whether Julian epochs fall in the observable months (month = twelfth of a year)."""
    if months is None:
        return np.ones(np.shape(t), bool)
    month = np.floor(np.mod(t, 1.0) * 12.0).astype(int) + 1
    return np.isin(month, months)


def season_intervals(start, end, months):
    """Observable intervals [from, to] (Julian yr) inside [start, end], for shading.

    Parameters
    ----------
    start, end : float
        Span (Julian yr).
    months : tuple of int or None
        Observable months (1-12); a month is a twelfth of the Julian year.

    Returns
    -------
    list of (float, float)
        Runs of consecutive observable months, clipped to the span; empty
        when ``months`` is None (no season given: nothing is shaded).
    """
    if not months:
        return []
    edges = np.arange(np.floor(start), np.ceil(end) + 1.0 / 12.0, 1.0 / 12.0)
    ok = _observable(edges[:-1] + 1.0 / 24.0, months).astype(int)
    run = np.flatnonzero(np.diff(np.concatenate([[0], ok, [0]])))
    out = []
    for a, b in zip(run[0::2], run[1::2], strict=True):
        lo, hi = max(edges[a], start), min(edges[b], end)
        if hi > lo:
            out.append((float(lo), float(hi)))
    return out


def candidate_epochs(start, end, months=None, per_season=1, epochs=None):
    """Candidate epochs: user's list filtered by season, or ``per_season`` per season.

    A season is a run of consecutive observable months (wrapping over the new
    year); its ``per_season`` epochs sit at the centres of equal parts of it.
    Months are twelfths of the Julian year (off by at most a day from the
    calendar).  Epochs outside [start, end] are dropped.
    """
    if epochs is not None:
        t = np.sort(np.asarray(epochs, float))
        return t[(t >= start) & (t <= end) & _observable(t, months)]
    fine = np.arange(np.floor(start) - 1.0, np.ceil(end) + 1.0, 1.0 / 12.0) + 1.0 / 24.0
    ok = _observable(fine, months).astype(int)
    if ok.all():  # observable all year: every year is one season
        ok[np.round((fine - 1.0 / 24.0) * 12).astype(int) % 12 == 0] = 0
        ok = _observable(fine, months).astype(int) * (ok > 0)
    edges = np.flatnonzero(np.diff(np.concatenate([[0], ok, [0]])))
    out = []
    for a, b in zip(edges[0::2], edges[1::2], strict=True):
        lo, hi = fine[a] - 1.0 / 24.0, fine[b - 1] + 1.0 / 24.0
        out += list(lo + (np.arange(per_season) + 0.5) * (hi - lo) / per_season)
    t = np.round(np.array(out), 4)
    return t[(t >= start) & (t <= end)]
