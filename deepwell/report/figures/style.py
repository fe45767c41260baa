"""deepwell's figure style kit: one palette, one rc style, one way to make and save a figure.

Every figure is built on a plain :class:`matplotlib.figure.Figure` with the
Agg canvas (no screen, no pyplot state), inside ``matplotlib.rc_context(STYLE)``
so deepwell's style never leaks into the caller's matplotlib settings, and is
written by :func:`save_figure` as PDF (vector) and PNG with fixed metadata, so
identical input gives identical files.
"""

import hashlib
import re
from pathlib import Path

import matplotlib
from cycler import cycler
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure

__all__ = ["PALETTE", "MARKERS", "MODEL_COLOUR", "COLOUR", "MASS_MARKER", "STYLE", "FORMATS",
           "SOLAR_MASS", "RASTER_POINTS", "unit_label", "style_of", "new_figure",
           "unique_names", "file_stem", "save_figure"]

#: File formats of every figure: PDF (vector) and PNG (raster at STYLE["savefig.dpi"]).
FORMATS = ("pdf", "png")


#: Colour-blind-safe qualitative palette of Okabe & Ito (2008), "Color Universal
#: Design" (without its black, kept for models and the mass), reordered so that
#: the pale yellow comes last: orange, sky blue, bluish green, blue, vermillion,
#: reddish purple, yellow.
PALETTE = ("#E69F00", "#56B4E9", "#009E73", "#0072B2", "#D55E00", "#CC79A7", "#F0E442")


#: Marker shapes cycled together with the colours, so that every star (or data
#: set) differs in shape too; colour is never the only cue.
MARKERS = ("o", "s", "^", "D", "v", "P", "X")


MODEL_COLOUR = "#000000"
#: The same palette by colour name (and black), for figures that give colours a meaning.
COLOUR = dict(zip(("orange", "sky", "green", "blue", "vermillion", "purple", "yellow"), PALETTE,
                  strict=True), black=MODEL_COLOUR)


#: The one spelling of the solar mass in figure labels (mathtext).
SOLAR_MASS = r"$M_\odot$"

#: Above this many points in one figure, point layers are rasterised (drawn as an
#: image inside the PDF at STYLE["savefig.dpi"]) and drawn without error bars, so a
#: survey-scale figure stays small and quick to open; lines and text stay vector.
RASTER_POINTS = 5000

_UNIT_LABELS = {"solMass": SOLAR_MASS, "km / s": "km/s", "mas / yr": "mas/yr", "AU": "au",
                "yr": "yr", "deg": "deg", "mas": "mas", "pc": "pc", "au": "au"}


def unit_label(unit):
    r"""How an astropy unit string is written on a figure axis (``solMass`` -> M_sun).

    Parameters
    ----------
    unit : str or None
        Astropy unit string from :mod:`deepwell.core.units`; ``""`` or None is
        dimensionless.

    Returns
    -------
    str
        The unit as printed, e.g. ``r"$M_\odot$"``, ``"km/s"``; ``""`` when dimensionless.
    """
    if not unit:
        return ""
    return _UNIT_LABELS.get(unit, unit.replace(" / ", "/"))


MASS_MARKER = dict(marker="+", s=110, color=MODEL_COLOUR, zorder=6, linewidths=1.4)


#: deepwell's plot style: one dict, applied with matplotlib.rc_context.
STYLE = {
    "font.size": 8.5,
    "axes.titlesize": 9.5,
    "axes.titleweight": "bold",
    "axes.labelsize": 8.5,
    "axes.linewidth": 0.7,
    "axes.grid": True,
    "axes.spines.top": False,
    "axes.spines.right": False,
    "axes.prop_cycle": cycler(color=PALETTE),
    "grid.linewidth": 0.4,
    "grid.alpha": 0.35,
    "grid.linestyle": ":",
    "xtick.direction": "in",
    "ytick.direction": "in",
    "xtick.labelsize": 7.5,
    "ytick.labelsize": 7.5,
    "lines.linewidth": 1.0,
    "lines.markersize": 3.5,
    "errorbar.capsize": 0,
    "legend.fontsize": 7,
    "legend.frameon": False,
    "legend.handlelength": 1.5,
    "savefig.dpi": 200,
    "path.simplify": True,
}


def style_of(k):
    """Colour and marker of item k; both change, so colour is never the only cue.

    The first ``len(PALETTE) * len(MARKERS)`` (49) items all get different
    (colour, marker) pairs, and neighbours differ in both.
    """
    return PALETTE[k % len(PALETTE)], MARKERS[(k // len(PALETTE) + k) % len(MARKERS)]


def new_figure(size):
    """A figure of ``size`` (inches) on the Agg canvas, outside pyplot."""
    # Fixed margins instead of a layout engine: layout engines redo their work
    # on every save and would double the figure time.
    fig = Figure(figsize=size)
    FigureCanvasAgg(fig)
    return fig


def unique_names(names):
    """Names in order of first appearance, each once."""
    return list(dict.fromkeys(names))


#: Longest name kept whole in a file stem (characters); far below the 255 bytes
#: most file systems allow for a file name (common practice).
STEM_NAME_MAX = 60
_PLAIN = re.compile(r"[a-z0-9][a-z0-9._-]*")


def file_stem(prefix, name):
    """File stem ``<prefix>_<name>`` that is safe, bounded, unique and stable per name.

    A name of lower-case ASCII letters, digits, ``.``, ``_`` and ``-`` (starting
    with a letter or digit) of at most :data:`STEM_NAME_MAX` characters is kept as
    it is.  Any other name is written with its unsafe characters replaced by ``_``,
    cut to :data:`STEM_NAME_MAX` characters, and followed by ``-`` and 10
    hexadecimal digits of the BLAKE2b hash of the name's UTF-8 bytes: so ``a/b``
    and ``a b`` get different stems, ``A`` and ``a`` differ on a file system that
    ignores case, and the same name always gets the same stem.

    Parameters
    ----------
    prefix : str
        Figure family, e.g. ``"star"``.
    name : str
        Star (or data-set) name as given in the tables.

    Returns
    -------
    str
        At most ``len(prefix) + 72`` characters.
    """
    name = str(name)
    if len(name) <= STEM_NAME_MAX and _PLAIN.fullmatch(name):
        return f"{prefix}_{name}"
    safe = "".join(c if c.isascii() and (c.isalnum() or c in "-_.") else "_" for c in name)
    digest = hashlib.blake2b(name.encode("utf-8"), digest_size=5).hexdigest()
    return f"{prefix}_{safe[:STEM_NAME_MAX]}-{digest}"


def _metadata(fmt):
    # Fixed metadata: no creation date, so identical input gives identical files.
    if fmt == "pdf":
        return {"Creator": "deepwell", "Producer": "deepwell", "CreationDate": None}
    if fmt == "png":
        return {"Software": "deepwell"}
    return None


def save_figure(fig, folder, stem, formats=FORMATS):
    """Write ``fig`` as ``folder/stem.<fmt>`` for every format; return the paths.

    The figure is cleared afterwards (it is not registered with pyplot, so it
    is freed once unreferenced).
    """
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    paths = []
    with matplotlib.rc_context(STYLE):
        for fmt in formats:
            path = folder / f"{stem}.{fmt}"
            fig.savefig(path, format=fmt, metadata=_metadata(fmt))
            paths.append(path)
    fig.clear()
    return paths
