"""Tests of how a report's figures are drawn: which stars get figures of their own
beyond STAR_FIGURE_LIMIT stars, the progress lines, and drawing in worker processes
(the same files as drawing in one process).

The many-star fit results are built by hand: invented stars on chosen orbits with
chosen period errors, so the expected choice is known without the fitter.
"""

import re
import threading

import numpy as np
import pytest

from deepwell.fit.result import FitResult, physical_labels, physical_vector
from deepwell.model.epochs import observations_at
from deepwell.model.joint import JointModel
from deepwell.model.layout import internal_star_values
from deepwell.report.figures import drawing
from deepwell.report.figures.gallery import (
    STAR_FIGURE_LIMIT,
    FigureOptions,
    choose_star_figures,
    left_out_text,
    write_figures,
)
from deepwell.report.figures.style import new_figure
from deepwell.tables.settings import Settings


def _many_star_result(n_stars, rel_period_errors, rng, n_epochs=8):
    """A FitResult of ``n_stars`` invented stars whose period errors are sigma_P = rel * P."""
    stars = [f"m-{k:04d}" for k in range(n_stars)]
    obs = observations_at(stars, np.linspace(2000.0, 2024.0, n_epochs), [2010.0, 2020.0],
                          0.5, 10.0, dataset="survey")
    model = JointModel(obs, reference_epoch=2010.0, stars=stars)
    vec = [{"mass": 3e6, "distance": 7000.0}.get(n, 0.0) for n in model.layout.shared_names]
    for _ in stars:
        vec += list(internal_star_values(rng.uniform(20.0, 200.0), rng.uniform(0.1, 0.9),
                                         rng.uniform(0.2, 3.0), rng.uniform(0, 2 * np.pi),
                                         rng.uniform(0, 2 * np.pi), rng.uniform(2000, 2020)))
    vec = np.array(vec)
    labels = physical_labels(model.layout)
    values = physical_vector(model.layout, vec)
    sigma = np.abs(values) * 1e-3 + 1e-3
    for k, star in enumerate(stars):
        i = labels.index(f"{star}:period")
        sigma[i] = rel_period_errors[k] * values[i]
    chi, nd = model.star_chi2(vec)
    return FitResult(model=model, internal=vec, internal_cov=np.diag(np.full(vec.size, 1e-6)),
                     free=np.ones(vec.size, bool), values=values, cov=np.diag(sigma**2),
                     labels=labels, chi2=float(model.chi2(vec)), n_data=model.n_data,
                     n_free=vec.size, star_chi2=chi, star_ndata=nd, converged=True, nfev=1,
                     notes=(), settings=Settings(reference_epoch=2010.0), observations=obs)


# ------------------------------------------------------------ which stars get figures
def test_beyond_the_limit_only_the_best_constrained_orbits_get_figures():
    rng = np.random.default_rng(18)
    n = STAR_FIGURE_LIMIT + 25
    rel = rng.uniform(1e-4, 0.3, n)  # chosen relative period errors, all different
    result = _many_star_result(n, rel, rng)
    choice = choose_star_figures(result)
    # the chosen relative errors, sorted by hand: the limit's worth of smallest ones
    best = {result.stars[k] for k in np.argsort(rel)[:STAR_FIGURE_LIMIT]}
    assert len(choice.drawn) == STAR_FIGURE_LIMIT
    assert set(choice.drawn) == best
    assert set(choice.left_out) == set(result.stars) - best and len(choice.left_out) == 25
    assert list(choice.drawn) == [s for s in result.stars if s in best]  # the fit's order
    # a named star is drawn even if its orbit is the worst; the total stays at the limit
    worst = result.stars[int(np.argmax(rel))]
    named = choose_star_figures(result, FigureOptions(stars=(worst,)))
    assert worst in named.drawn and len(named.drawn) == STAR_FIGURE_LIMIT
    assert named.named == (worst,)
    # no limit: every star
    assert choose_star_figures(result, FigureOptions(star_limit=None)).left_out == ()
    with pytest.raises(ValueError, match="no star 'nobody'"):
        choose_star_figures(result, FigureOptions(stars=("nobody",)))


def test_up_to_the_limit_every_star_gets_figures():
    rng = np.random.default_rng(5)
    result = _many_star_result(6, np.full(6, 0.01), rng)
    choice = choose_star_figures(result, FigureOptions(star_limit=6))
    assert choice.drawn == tuple(result.stars) and choice.left_out == ()
    assert left_out_text(choice) == ""


def test_report_draws_the_limit_of_star_figures_and_names_the_others(tmp_path):
    rng = np.random.default_rng(7)
    rel = np.array([0.05, 0.001, 0.2, 0.002, 0.4, 0.003])  # chosen: stars 1, 3, 5 are best
    result = _many_star_result(6, rel, rng)
    lines = []
    figs = write_figures(result, tmp_path, formats=("png",),
                         options=FigureOptions(star_limit=3), progress=lines.append)
    stars = sorted(p.stem for p in tmp_path.glob("star_*.png"))
    assert stars == [f"star_m-000{k}" for k in (1, 3, 5)]
    assert sorted(figs) == ["sky", *stars]
    assert lines[0].startswith("drawing 4 figures")
    text = left_out_text(choose_star_figures(result, FigureOptions(star_limit=3)))
    assert "3 of the 6 stars have no star figure" in text
    assert "m-0000, m-0002, m-0004" in text  # the rest, named
    assert "--figure-stars" in text and "--all-star-figures" in text  # how to get them


# ------------------------------------------------------------------ progress lines
def _tiny(k):
    fig = new_figure((2.0, 1.5))
    fig.add_axes((0.2, 0.2, 0.7, 0.7)).plot([0, 1], [0, k])
    return fig


def _tiny_jobs(n):
    return [(f"tiny_{k}", lambda k=k: _tiny(k), f"figure {k}") for k in range(n)]


def test_progress_counts_every_figure_once(tmp_path, monkeypatch):
    monkeypatch.setattr(drawing, "PROGRESS_SECONDS", 0.0)  # a counter line per figure
    lines = []
    drawing.draw_jobs(_tiny_jobs(5), tmp_path, ("png",), processes=1, progress=lines.append)
    assert lines[0] == "drawing 5 figures"
    assert [re.sub(r" \(\d+ s\)$", "", x) for x in lines[1:]] == [
        f"figures: {k} of 5 drawn" for k in range(1, 6)]


def test_quick_drawings_print_only_the_first_line(tmp_path, monkeypatch):
    monkeypatch.setattr(drawing, "PROGRESS_SECONDS", 1e9)
    lines = []
    drawing.draw_jobs(_tiny_jobs(3), tmp_path, ("png",), processes=1, progress=lines.append)
    assert lines == ["drawing 3 figures"]


# ------------------------------------------------------------- worker processes
def test_figures_drawn_in_processes_are_the_files_drawn_in_one(tmp_path):
    rng = np.random.default_rng(11)
    result = _many_star_result(4, np.full(4, 0.01), rng)
    if drawing.figure_processes(len(result.stars) + 1, 2) < 2:
        pytest.skip("one core or other threads in this test process: no worker processes")
    one = write_figures(result, tmp_path / "one", options=FigureOptions(processes=1))
    lines = []
    two = write_figures(result, tmp_path / "two", options=FigureOptions(processes=2),
                        progress=lines.append)
    assert lines[0].endswith("in 2 processes")  # the files really came from two workers
    assert list(one) == list(two) == ["sky"] + [f"star_{s}" for s in result.stars]
    for stem in one:
        assert [p.name for p in one[stem]["files"]] == [p.name for p in two[stem]["files"]]
        for a, b in zip(one[stem]["files"], two[stem]["files"], strict=True):
            assert a.read_bytes() == b.read_bytes()  # fixed metadata: identical files


def test_processes_are_used_only_where_they_pay_and_are_safe():
    single = threading.active_count() == 1
    cores = drawing._usable_cores()
    expected = 2 if single and cores >= 2 else 1
    assert drawing.figure_processes(drawing.PARALLEL_FIGURES, 2) == expected
    assert drawing.figure_processes(drawing.PARALLEL_FIGURES - 1, 2) == 1  # too few figures
    assert drawing.figure_processes(50, 1) == 1
