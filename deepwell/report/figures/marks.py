"""What the orbit figures mark: error classes of residual panels, epoch labels, motion arrows.

The choices are pure functions (:func:`error_classes`, :func:`epoch_marks`,
:func:`arrow_phases`), tested directly; :func:`draw_epoch_marks` and
:func:`draw_direction_arrows` only draw them on a sky panel whose x axis
points east to the left.
"""

import numpy as np
from matplotlib.ticker import MaxNLocator

__all__ = ["ERROR_RATIO", "error_classes", "epoch_marks", "arrow_phases",
           "draw_epoch_marks", "draw_direction_arrows"]

#: Data sets whose typical stated errors differ by more than this factor never share a
#: residual axis: on a shared axis the precise ones shrink to a flat line (common
#: practice: one panel per instrument class).
ERROR_RATIO = 10.0


def error_classes(datasets, errors, ratio=ERROR_RATIO):
    """Group data sets into classes whose median stated errors differ by at most ``ratio``.

    Parameters
    ----------
    datasets : array_like of str
        Data set of every row.
    errors : array_like of float
        Stated error of every row (mas or km/s; any one unit).
    ratio : float
        Largest ratio of median errors inside one class.

    Returns
    -------
    list of list of str
        Classes from the most precise to the least; inside each class the data
        sets in order of first appearance.

    Notes
    -----
    Data sets are sorted by their median error; a class whose largest median
    exceeds ``ratio`` times its smallest is cut at the largest ratio between
    neighbouring medians, and each part is treated the same way, so no two
    data sets of one class differ by more than ``ratio`` and the cuts fall
    where the errors jump.
    """
    datasets = np.asarray(datasets).astype(str)
    errors = np.asarray(errors, float)
    names = list(dict.fromkeys(datasets.tolist()))
    median = {n: float(np.median(errors[datasets == n])) for n in names}
    ordered = sorted(names, key=lambda n: (median[n], names.index(n)))

    def split(group):
        values = np.array([median[n] for n in group])
        if len(group) < 2 or values[-1] <= ratio * values[0]:
            return [group]
        cut = int(np.argmax(values[1:] / np.maximum(values[:-1], 1e-300))) + 1
        return split(group[:cut]) + split(group[cut:])

    return [sorted(c, key=names.index) for c in split(ordered)] if names else []


def epoch_marks(t_first, t_last, period, nbins=4):
    """A few round epochs to label on a sky track (Julian yr).

    Within the data span, but over at most the last orbit of it (a track
    drawn once would otherwise carry two labels at one place).

    Parameters
    ----------
    t_first, t_last : float
        Span of the star's data (yr).
    period : float
        Orbital period (yr).
    nbins : int
        At most about this many intervals between labels.

    Returns
    -------
    ndarray
        Round epochs (whole years when the window spans a few years).
    """
    lo = max(float(t_first), float(t_last) - 0.98 * float(period))
    hi = float(t_last)
    if not hi > lo:
        return np.array([lo])
    ticks = MaxNLocator(nbins=nbins, steps=[1, 2, 2.5, 5, 10]).tick_values(lo, hi)
    return ticks[(ticks >= lo - 1e-9) & (ticks <= hi + 1e-9)]


def arrow_phases(n=3):
    """Orbital phases (fractions of a period after pericentre) of the motion arrows.

    Spread around apocentre, where the star moves slowly and the track is
    clear of the crowded pericentre.
    """
    return 0.5 + (np.arange(n) - 0.5 * (n - 1)) * (0.5 / max(n, 1))


def _outward(x, y, cx, cy):
    """Unit vector (display orientation: east to the left) from (cx, cy) towards (x, y)."""
    d = np.array([-(x - cx), y - cy])
    norm = np.hypot(*d)
    return d / norm if norm > 0 else np.array([0.0, 1.0])


def draw_epoch_marks(ax, east, north, epochs, centre, later=None, colour="black", size=6.0):
    """Dots and year labels at the sky positions of ``epochs`` (mas).

    Each label sits off the track: along the track's normal (from the
    positions ``later``, a little after each epoch), on the side away from
    ``centre``; without ``later``, straight away from ``centre``.
    """
    cx, cy = centre
    ax.plot(east, north, "o", color=colour, ms=2.2, zorder=5, label="_nolegend_")
    for j, (x, y, t) in enumerate(zip(east, north, epochs, strict=True)):
        u = _outward(x, y, cx, cy)
        if later is not None:
            step = np.array([-(later[0][j] - x), later[1][j] - y])
            if np.hypot(*step) > 0:
                normal = np.array([-step[1], step[0]]) / np.hypot(*step)
                u = normal if normal @ u >= 0 else -normal
        ha = "left" if u[0] > 0.35 else "right" if u[0] < -0.35 else "center"
        va = "bottom" if u[1] > 0.35 else "top" if u[1] < -0.35 else "center"
        ax.annotate(f"{t:g}", (x, y), xytext=(5.0 * u[0], 5.0 * u[1]),
                    textcoords="offset points", ha=ha, va=va, fontsize=size,
                    color=colour, zorder=6)


def draw_direction_arrows(ax, east, north, colour="black", lw=0.9):
    """Arrow heads along a track: from (east[j], north[j]) towards (east[j+1], north[j+1]).

    ``east``, ``north`` hold pairs of close positions (even length), the
    second of each pair a little later than the first.
    """
    for j in range(0, len(east) - 1, 2):
        ax.annotate("", xy=(east[j + 1], north[j + 1]), xytext=(east[j], north[j]),
                    arrowprops=dict(arrowstyle="-|>", color=colour, lw=lw, mutation_scale=9,
                                    shrinkA=0, shrinkB=0), zorder=5)
