"""The report folder as a trust boundary, and bounded work on absurd input.

Every file in a report folder is treated as possibly hostile and every run as
possibly killed at any instant: nothing outside ``--out`` is ever written or
moved, a replace leaves the old report or the new one whole, saved state is
checked before use, and absurd input is refused with one line (exit 2).
The rules are common practice for tools that write into user folders; the
numbers checked are file contents (bytes) and exit statuses, which are known
independently of deepwell.
"""

import hashlib
import json
import os
import re
import shutil
import signal
import time
from pathlib import Path

import numpy as np
import pytest
from astropy.time import Time

from deepwell.cli import main
from deepwell.cli.app import Terminated, sigterm_cleans_up
from deepwell.core.errors import DeepwellError, OutputError
from deepwell.report import outdir
from deepwell.report.outdir import MANIFEST, install_output, prepare_output, staged_output
from deepwell.report.tables import _tex_escape, md_text
from deepwell.results.saved_fit import load_fit
from deepwell.tables.observations import read_positions
from deepwell.tools.journal import TrialJournal
from tests.conftest import one_line_error


# ------------------------------------------------------------------ helpers
def _snapshot(folder):
    """Everything under ``folder``, links not followed: {path: bytes | link target | 'dir'}."""
    folder = Path(folder)
    if not os.path.lexists(folder):
        return None
    out = {}
    for dirpath, dirs, files in os.walk(folder):
        for name in dirs + files:
            p = Path(dirpath) / name
            rel = p.relative_to(folder).as_posix()
            if p.is_symlink():
                out[rel] = ("link", os.readlink(p))
            elif p.is_dir():
                out[rel] = "dir"
            else:
                out[rel] = p.read_bytes()
    return out


def _sha(data):
    return hashlib.sha256(data).hexdigest()


def _manifest(folder, files):
    (Path(folder) / MANIFEST).write_text(json.dumps({"files": files}))


def _fake_report(tmp, names):
    for n in names:
        (tmp / n).parent.mkdir(parents=True, exist_ok=True)
        (tmp / n).write_text(f"new {n}")


def _siblings(final):
    return sorted(p.name for p in Path(final).parent.iterdir() if "deepwell-" in p.name)


@pytest.fixture()
def no_fit(monkeypatch):
    """Make any fit fail loudly: the refusals tested here must come before it."""
    def refuse(*args, **kwargs):
        raise AssertionError("the fit ran although the output folder was unusable")
    monkeypatch.setattr("deepwell.tools.pipeline.fit_joint", refuse)


# ------------------------------------------- 1: no write outside --out through links
def _outside(tmp_path):
    out = tmp_path / "elsewhere"
    out.mkdir()
    (out / "stars.ecsv").write_text("someone else's table")
    (out / "precious.txt").write_text("precious")
    return out


def _linked_subfolder(tmp_path):
    """A crafted report: tables/ links to another folder, the manifest lists files there."""
    rep, outside = tmp_path / "rep", _outside(tmp_path)
    rep.mkdir()
    (rep / "summary.json").write_text("{}")
    (rep / "tables").symlink_to(outside, target_is_directory=True)
    _manifest(rep, {"summary.json": _sha(b"{}"),
                    "tables/stars.ecsv": _sha(b"someone else's table"),
                    "tables/precious.txt": _sha(b"precious")})
    return rep, outside


def _linked_file(tmp_path):
    """A crafted report whose manifest entry summary.json is a link to an outside file."""
    rep, outside = tmp_path / "rep", _outside(tmp_path)
    rep.mkdir()
    (rep / "summary.json").symlink_to(outside / "precious.txt")
    _manifest(rep, {"summary.json": _sha(b"precious")})
    return rep, outside


def _subfolder_is_link_to_file(tmp_path):
    """figures/ replaced by a link to a file (issue 16)."""
    rep, outside = tmp_path / "rep", _outside(tmp_path)
    rep.mkdir()
    (rep / "figures").symlink_to(outside / "precious.txt")
    _manifest(rep, {"figures/sky.png": _sha(b"x")})
    return rep, outside


def _subfolder_is_file(tmp_path):
    """figures replaced by a plain file, with the manifest listing files under it."""
    rep, outside = tmp_path / "rep", _outside(tmp_path)
    rep.mkdir()
    (rep / "figures").write_text("not a folder")
    _manifest(rep, {"figures/sky.png": _sha(b"x")})
    return rep, outside


@pytest.mark.parametrize("craft, words", [(_linked_subfolder, "symbolic link"),
                                          (_linked_file, "symbolic link"),
                                          (_subfolder_is_link_to_file, "symbolic link"),
                                          (_subfolder_is_file, "is not a folder")])
def test_replace_never_follows_a_link_out_of_the_report_folder(tmp_path, capsys, small_scenario,
                                                               no_fit, craft, words):
    rep, outside = craft(tmp_path)
    before_out, before_rep = _snapshot(outside), _snapshot(rep)
    code = main(["fit", str(small_scenario), "--out", str(rep), "--replace", "--no-figures"])
    assert code == 2
    msg = one_line_error(capsys)
    assert words in msg and str(rep) in msg
    assert _snapshot(outside) == before_out  # the outside folder is byte-identical
    assert _snapshot(rep) == before_rep and _siblings(rep) == []


def test_link_planted_during_the_run_is_refused_at_install(tmp_path):
    rep, outside = tmp_path / "rep", _outside(tmp_path)
    with staged_output(rep) as tmp:
        _fake_report(tmp, ("summary.json", "tables/stars.ecsv"))
    tmp = prepare_output(rep, replace=True)
    _fake_report(tmp, ("summary.json", "tables/stars.ecsv"))
    shutil.rmtree(rep / "tables")  # swapped for a link while the fit ran
    (rep / "tables").symlink_to(outside, target_is_directory=True)
    before_out, before_rep = _snapshot(outside), _snapshot(rep)
    with pytest.raises(OutputError, match="symbolic link") as exc:
        install_output(tmp, rep, replace=True)
    assert "\n" not in str(exc.value)
    assert _snapshot(outside) == before_out and _snapshot(rep) == before_rep
    assert _siblings(rep) == []


def test_foreign_links_are_kept_as_links_and_never_followed(tmp_path):
    rep, outside = tmp_path / "rep", _outside(tmp_path)
    with staged_output(rep) as tmp:
        _fake_report(tmp, ("summary.json",))
    (rep / "data").symlink_to(outside, target_is_directory=True)  # the user's own link
    before_out = _snapshot(outside)
    with staged_output(rep, replace=True) as tmp:
        _fake_report(tmp, ("summary.json", "tables/stars.ecsv"))
    assert os.readlink(rep / "data") == str(outside)
    assert _snapshot(outside) == before_out
    assert (rep / "tables" / "stars.ecsv").read_text() == "new tables/stars.ecsv"


# ------------------------------------------------ 2: the replace is atomic under SIGKILL
OLD_FILES = ("summary.json", "report.md", "tables/stars.ecsv", "tables/old_only.ecsv",
             "figures/sky.png", "figures/star_a.png")
NEW_FILES = ("summary.json", "report.md", "tables/stars.ecsv", "tables/new_only.ecsv",
             "figures/sky.png")
_COUNTED = ("link", "symlink", "rename", "replace", "mkdir", "chmod", "unlink", "rmdir")


def _earlier_report(root):
    """An earlier report with foreign files beside and inside its folders."""
    rep = root / "rep"
    with staged_output(rep) as tmp:
        for n in OLD_FILES:
            (tmp / n).parent.mkdir(parents=True, exist_ok=True)
            (tmp / n).write_text(f"old {n}")
    (rep / "keep.txt").write_text("the user's notes")
    (rep / "tables" / "mine.csv").write_text("the user's table")
    (rep / "empty").mkdir()
    (rep / "link").symlink_to("../nowhere")
    return rep


def _install_killed_at(rep, kill_at, exchange):
    """Fork a child that replaces the report and is SIGKILLed before mutating step ``kill_at``."""
    pid = os.fork()
    if pid == 0:  # the child: never returns
        try:
            tmp = prepare_output(rep, replace=True)
            _fake_report(tmp, NEW_FILES)
            count = [0]

            def counted(fn):
                def wrapper(*args, **kwargs):
                    if count[0] == kill_at:
                        os.kill(os.getpid(), signal.SIGKILL)
                    count[0] += 1
                    return fn(*args, **kwargs)
                return wrapper

            for name in _COUNTED:
                setattr(os, name, counted(getattr(os, name)))
            if not exchange:
                outdir._exchange = lambda a, b: False
            else:
                outdir._exchange = counted(outdir._exchange)
            install_output(tmp, rep, replace=True)
            os._exit(0)
        except BaseException:
            os._exit(3)
    _, status = os.waitpid(pid, 0)
    return status


@pytest.mark.parametrize("exchange", [True, False], ids=["renameat2", "two-renames"])
def test_kill_at_any_step_of_a_replace_leaves_the_old_or_the_new_report_whole(tmp_path,
                                                                            exchange):
    done = tmp_path / "done"
    done.mkdir()
    assert _install_killed_at(_earlier_report(done), -1, exchange) == 0
    new = _snapshot(done / "rep")
    assert {k for k, v in new.items() if v != "dir"} == {
        *NEW_FILES, MANIFEST, "keep.txt", "tables/mine.csv", "link"}
    k, outcomes = 0, set()
    while True:
        root = tmp_path / f"k{k}"
        root.mkdir()
        rep = _earlier_report(root)
        old = _snapshot(rep)
        status = _install_killed_at(rep, k, exchange)
        if os.WIFEXITED(status):  # no step left to kill at
            assert os.WEXITSTATUS(status) == 0 and _snapshot(rep) == new
            break
        assert os.WTERMSIG(status) == signal.SIGKILL
        now = _snapshot(rep)
        # between the two renames of the fallback the old folder is whole, aside
        assert now in (old, new) or (not exchange and now is None)
        # the next run cleans up (and puts an old report left aside back)
        shutil.rmtree(prepare_output(rep, replace=True))
        after = _snapshot(rep)
        assert after in (old, new) and _siblings(rep) == []
        outcomes.add("old" if after == old else "new")
        k += 1
    print(f"killed at each of {k} steps")
    assert k > 5 and outcomes == {"old", "new"}  # killed before and after the swap


def test_file_added_in_the_last_instant_before_the_swap_is_kept(tmp_path, monkeypatch,
                                                                caplog):
    rep = _earlier_report(tmp_path)
    real = outdir._swap

    def late_write(tmp, final):
        (final / "late.txt").write_text("written while deepwell swapped")
        return real(tmp, final)

    monkeypatch.setattr(outdir, "_swap", late_write)
    with staged_output(rep, replace=True) as tmp:
        _fake_report(tmp, NEW_FILES)
    kept = [p for p in tmp_path.iterdir() if p.name.startswith("rep.kept-")]
    assert len(kept) == 1 and _snapshot(kept[0]) == {"late.txt": b"written while deepwell swapped"}
    assert "kept" in caplog.text and _siblings(rep) == []
    assert (rep / "keep.txt").read_text() == "the user's notes"


def test_sigterm_while_writing_removes_the_temporary_folder(tmp_path):
    rep = _earlier_report(tmp_path)
    old = _snapshot(rep)
    pid = os.fork()
    if pid == 0:
        try:
            with sigterm_cleans_up(), staged_output(rep, replace=True) as tmp:
                _fake_report(tmp, NEW_FILES)
                os.kill(os.getpid(), signal.SIGTERM)
                time.sleep(30)
        except Terminated:
            os._exit(143)
        os._exit(0)
    _, status = os.waitpid(pid, 0)
    assert os.WEXITSTATUS(status) == 143
    assert _snapshot(rep) == old and _siblings(rep) == []


# ------------------------------------------------ 3: the kind of --out, before the fit
def _link_to_empty(tmp_path):
    (tmp_path / "real").mkdir()
    (tmp_path / "out").symlink_to(tmp_path / "real", target_is_directory=True)
    return str(tmp_path / "out"), "symbolic link"


def _dangling(tmp_path):
    (tmp_path / "out").symlink_to(tmp_path / "nowhere")
    return str(tmp_path / "out"), "symbolic link"


def _current(tmp_path):
    return ".", "current folder"


def _a_file(tmp_path):
    (tmp_path / "out").write_text("x")
    return str(tmp_path / "out"), "not a folder"


@pytest.mark.parametrize("make", [_link_to_empty, _dangling, _current, _a_file])
def test_unusable_out_is_refused_before_the_fit(tmp_path, capsys, monkeypatch, small_scenario,
                                                no_fit, make):
    monkeypatch.chdir(tmp_path)
    out, words = make(tmp_path)
    before = _snapshot(tmp_path)
    assert main(["fit", str(small_scenario), "--out", out, "--no-figures"]) == 2
    assert words in one_line_error(capsys)
    assert _snapshot(tmp_path) == before


def test_mount_point_and_read_only_folder_are_refused_before_the_fit(tmp_path, capsys,
                                                                   monkeypatch, small_scenario,
                                                                   no_fit):
    out = tmp_path / "mnt"
    out.mkdir()
    real = os.path.ismount
    monkeypatch.setattr(os.path, "ismount", lambda p: os.fspath(p) == str(out) or real(p))
    assert main(["fit", str(small_scenario), "--out", str(out), "--no-figures"]) == 2
    assert "mount point" in one_line_error(capsys)
    monkeypatch.setattr(os.path, "ismount", real)
    # a read-only folder (os.access is what a read-only mount answers, even for root)
    real_access = os.access
    monkeypatch.setattr(os, "access", lambda p, mode, **kw:
                        False if os.fspath(p) == str(out) and mode & os.W_OK
                        else real_access(p, mode, **kw))
    assert main(["fit", str(small_scenario), "--out", str(out), "--no-figures"]) == 2
    assert "not readable and writable" in one_line_error(capsys)
    assert list(out.iterdir()) == [] and _siblings(out) == []


# --------------------------------------------- a positions-only fit, for the saved state
@pytest.fixture(scope="module")
def positions_only(tmp_path_factory, small_scenario):
    """A report of a positions-only fit (distance fixed): (scenario, report, velocities)."""
    root = tmp_path_factory.mktemp("posonly")
    scen = root / "scen"
    shutil.copytree(small_scenario, scen)
    vel = root / "velocities.csv"
    (scen / "velocities.csv").rename(vel)
    settings = root / "settings.toml"
    settings.write_text("[shared.distance]\nvalue = 5200.0\nfixed = true\n")
    report = root / "rep"
    assert main(["fit", str(scen), "--out", str(report), "--no-figures", "-q",
                 "--settings", str(settings)]) == 0
    return scen, report, vel


def _plan(report, *extra):
    return main(["plan", str(report), "--from", "2025", "--to", "2030", "--draws", "30",
                 "--no-figures", "-q", *extra])


def _copy_report(report, tmp_path):
    dest = tmp_path / "rep"
    shutil.copytree(report, dest, symlinks=True)
    return dest


# ---------------------------------------------------- 4: the set of input files is compared
def test_plan_refuses_a_table_added_since_the_fit(positions_only, tmp_path, capsys):
    scen, report, vel = positions_only
    report = _copy_report(report, tmp_path)
    copy = tmp_path / "scen"
    shutil.copytree(scen, copy)
    shutil.copy(vel, copy / "velocities.csv")
    assert _plan(report, "--scenario", str(copy)) == 2
    msg = one_line_error(capsys)
    assert "velocities.csv" in msg and "added since the fit" in msg
    assert not (report / "plan").exists()
    # the same folder without the added table plans (exit 0)
    (copy / "velocities.csv").unlink()
    assert _plan(report, "--scenario", str(copy)) == 0
    assert (report / "plan" / "plan.md").is_file()


# ------------------------------------------------------------ 5: bounded work
@pytest.mark.parametrize("epoch", ["1e9", "-50000", "9999-12-31T23:59:60", "1799.9", "nan"])
def test_absurd_epoch_is_refused_naming_file_line_and_column(tmp_path, capsys, epoch):
    scen = tmp_path / "s"
    scen.mkdir()
    (scen / "positions.csv").write_text("star,epoch,ra,dec,ra_err,dec_err\n"
                                        "x,2001,1,2,0.5,0.5\n"
                                        f"x,{epoch},1,2,0.5,0.5\n"
                                        "x,2003,1,2,0.5,0.5\n")
    assert main(["fit", str(scen), "--out", str(tmp_path / "rep")]) == 2
    msg = one_line_error(capsys)
    assert "positions.csv" in msg and "line 3" in msg and "'epoch'" in msg
    assert not (tmp_path / "rep").exists()


def test_iso_epoch_in_range_is_converted_as_astropy_does(tmp_path):
    path = tmp_path / "positions.csv"
    path.write_text("star,epoch,ra,dec,ra_err,dec_err\nx,2016-12-31T23:59:60,1,2,0.5,0.5\n")
    # reference: astropy's UTC -> TT conversion of the same leap second (IERS leap-second
    # table bundled with astropy/ERFA); 1e-9 yr ~ 0.03 s
    want = Time("2016-12-31T23:59:60", scale="utc").tt.jyear
    assert read_positions(path).epoch[0] == pytest.approx(want, abs=1e-9)


@pytest.mark.parametrize("args, words", [
    (["--from", "2025", "--to", "1e7"], "outside the range"),
    (["--from", "2025", "--to", "2300"], "at most 200 years"),
    (["--from", "2025", "--to", "2030", "--step", "1e-6"], "at most 5000"),
    (["--from", "2025", "--to", "2030", "--draws", "0"], "--draws"),
    (["--from", "2025", "--to", "2030", "--resolution", "nan"], "--resolution"),
])
def test_plan_ranges_beyond_the_stated_limits_are_refused(positions_only, tmp_path, capsys,
                                                          args, words):
    report = _copy_report(positions_only[1], tmp_path)
    code = main(["plan", str(report), *args, "--no-figures", "-q"])
    assert code == 2
    assert words in one_line_error(capsys)
    assert not (report / "plan").exists()


def test_epochs_file_is_checked_and_closed(positions_only, tmp_path, capsys):
    report = _copy_report(positions_only[1], tmp_path)
    epochs = tmp_path / "epochs.txt"
    epochs.write_text("# candidate epochs\n2026.3\n\n2027.3  # spring\n")
    # warnings are errors in this suite: an unclosed file (ResourceWarning) fails the test
    assert _plan(report, "--epochs-file", str(epochs)) == 0
    forecast = (report / "plan" / "forecast.ecsv").read_text()
    assert "2026.3000" in forecast and "2027.3000" in forecast
    epochs.write_text("2026.3\n1e7\n")
    assert _plan(report, "--epochs-file", str(epochs), "--replace") == 2
    msg = one_line_error(capsys)
    assert "epochs.txt" in msg and "line 2" in msg


# -------------------------------------------------------------- 6: text injection
@pytest.mark.parametrize("column, row", [
    ("star", 'x,2001,1,2,0.5,0.5,a\n"bad\n# Heading",2002,1,2,0.5,0.5,a\n'),
    ("dataset", "x,2001,1,2,0.5,0.5,a\nx,2002,1,2,0.5,0.5,\"im\tager\"\n"),
    ("star", "x,2001,1,2,0.5,0.5,a\n\"y\x1b[31m\",2002,1,2,0.5,0.5,a\n"),
])
def test_control_characters_in_names_are_refused(tmp_path, capsys, column, row):
    scen = tmp_path / "s"
    scen.mkdir()
    (scen / "positions.csv").write_text("star,epoch,ra,dec,ra_err,dec_err,dataset\n" + row)
    assert main(["fit", str(scen), "--out", str(tmp_path / "rep")]) == 2
    msg = one_line_error(capsys)
    assert "positions.csv" in msg and "line 3" in msg and f"'{column}'" in msg
    assert "control character" in msg


def test_names_are_escaped_in_markdown_and_latex():
    name = "s|1 #2 *x* [a](b) <i>_ \\ `c` !~"
    cell = md_text(name)
    # CommonMark 0.31.2, sect. 2.4: any ASCII punctuation may be backslash-escaped (the
    # reader drops the backslash); GitHub-flavoured markdown tables: an escaped pipe does
    # not split a cell
    assert re.sub(r"\\([!-/:-@\[-`{-~])", r"\1", cell) == name
    assert "|" not in cell.replace("\\|", "")
    assert not re.search(r"(^|[^\\])[*_`#<\[]", cell)  # no unescaped markup left
    assert "\n" not in md_text("a\nb") and md_text("a\nb") == "a\\u000ab"
    # LaTeX specials (Lamport, LaTeX user's guide, sect. 2.2: # $ % & ~ _ ^ \ { })
    tex = _tex_escape("a_b&c%d#e\nf")
    assert tex == r"a\_b\&c\%d\#e f"


# ------------------------------------------------- 7: saved state checked against its schema
def _tamper_state(report, edit):
    path = report / "fit-state.json"
    state = json.loads(path.read_text())
    path.write_text(json.dumps(edit(state)))


def _drop(key):
    def edit(state):
        del state[key]
        return state
    return edit


def _short(state):
    state["internal"] = state["internal"][:-1]
    return state


def _bad_settings(state):
    state["settings"]["min_epochs"] = "three"
    return state


def _text_vector(state):
    state["free"] = ["yes"] * len(state["free"])
    return state


@pytest.mark.parametrize("edit, words", [
    (lambda s: [s], "holds a list"),
    (_drop("internal"), "'internal' is missing"),
    (_drop("checksums"), "'checksums' is missing"),
    (_short, "wrong type or length"),
    (_text_vector, "'free'"),
    (_bad_settings, "saved settings are invalid"),
    (lambda s: {**s, "format": "something else"}, "'format'"),
])
def test_damaged_fit_state_is_refused_naming_the_file(positions_only, tmp_path, capsys, edit,
                                                      words):
    report = _copy_report(positions_only[1], tmp_path)
    _tamper_state(report, edit)
    assert _plan(report) == 2
    msg = one_line_error(capsys)
    assert "fit-state.json" in msg and words in msg
    assert not (report / "plan").exists()


HEADER = {"scenario": "invented", "seed": 5}


@pytest.mark.parametrize("record, words", [
    ("[1, 2, 3]", "must be a JSON object"),
    ('{"status": "ok"}', "no trial number"),
    ('{"trial": "3", "status": "ok"}', "no trial number"),
    ('{"trial": 2}', "'status'"),
    ("{broken", "not a JSON record"),
])
def test_damaged_journal_record_is_refused_naming_file_and_line(tmp_path, record, words):
    path = tmp_path / "out.trials.jsonl"
    TrialJournal(path, HEADER).add({"trial": 0, "status": "ok", "chi2": 1.0})
    with path.open("a") as fh:
        fh.write(record + "\n")
        fh.write('{"trial": 1, "status": "failed"}\n')
    with pytest.raises(DeepwellError) as exc:
        TrialJournal(path, HEADER, resume=True)
    msg = str(exc.value)
    assert "\n" not in msg and str(path) in msg and "line 3" in msg and words in msg


def test_half_written_last_journal_line_is_still_ignored(tmp_path):
    path = tmp_path / "out.trials.jsonl"
    book = TrialJournal(path, HEADER)
    for i in range(3):
        book.add({"trial": i, "status": "ok"})
    text = path.read_text()
    path.write_text(text + text.splitlines()[-1][:12])  # as kill -9 can leave it
    assert sorted(TrialJournal(path, HEADER, resume=True).done) == [0, 1, 2]


# ------------------------------------------------------------- 9: line numbers
def test_line_numbers_count_physical_lines_after_a_quoted_newline(tmp_path):
    path = tmp_path / "positions.csv"
    path.write_text("star,epoch,ra,dec,ra_err,dec_err,note\n"
                    'x,2001,1,2,0.5,0.5,"a note\non two lines"\n'
                    "\n"
                    "x,2003,abc,2,0.5,0.5,\n")
    with pytest.raises(DeepwellError) as exc:
        read_positions(path)
    # header 1, the quoted record 2-3, a blank line 4: the bad row is on line 5
    assert "line 5" in str(exc.value) and "'ra'" in str(exc.value)


# ------------------------------------------------------- 8: nonsense is not accepted
def test_posterior_samples_with_nan_are_refused(positions_only, tmp_path, capsys):
    scen, report, _ = positions_only
    report = _copy_report(report, tmp_path)
    fit = load_fit(report)
    samples = np.repeat(fit.internal[None, :], 40, axis=0)
    samples[7, 0] = np.nan
    np.savez(report / "samples.npz", internal_samples=samples,
             internal_names=np.array(fit.model.layout.names()))
    assert _plan(report, "--samples", str(report / "samples.npz")) == 2
    msg = one_line_error(capsys)
    assert "samples.npz" in msg and "not finite (NaN or infinite: 1 of" in msg


def test_fit_state_that_is_a_link_is_not_followed(positions_only, tmp_path, capsys):
    report = _copy_report(positions_only[1], tmp_path)
    (report / "fit-state.json").unlink()
    (report / "fit-state.json").symlink_to("/dev/zero")  # reading it would never end
    assert _plan(report) == 2
    msg = one_line_error(capsys)
    assert "fit-state.json" in msg and "not a regular file" in msg
