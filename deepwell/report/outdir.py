"""A safe report folder: written aside, swapped into place whole, never followed out.

A report is first written into a temporary sibling of the final folder
(:func:`prepare_output`) and put in place by :func:`install_output` once every
file exists. deepwell records the files it wrote in a manifest,
``.deepwell-manifest.json``, with their SHA-256 digests. The rules:

* a missing or empty final folder is simply created (one rename);
* a non-empty folder without a manifest (not made by deepwell) is refused,
  unless ``replace=True``; even then no file deepwell did not write is ever
  deleted or overwritten (a clash is refused, naming the file);
* a folder deepwell made is refused without ``replace=True`` ("holds an
  earlier report"); with it, exactly the files of the old manifest go;
* a run that fails before installing removes its temporary folder and leaves
  the final folder untouched (:func:`staged_output` does this for you).

The report folder is a trust boundary. Nothing inside it is ever followed:
a symbolic link, or a manifest entry that leads out of the folder or through
a link or a file, is refused with one line before anything is written.
``--out`` itself must be a real folder (or absent), not the current folder,
not a mount point.

Replacing is atomic. The new folder is completed beside the old one: the new
report files, then every file deepwell did not write, hard-linked (or, where
the file system cannot link, copied) into the same place. Only then are the
two folders exchanged, with one ``renameat2(RENAME_EXCHANGE)`` on Linux, or
with two renames elsewhere (a run killed between the two leaves the old
folder whole under a hidden name, and the next run puts it back). A run
killed at any instant so leaves the old report or the new one, whole. The old
folder, now beside the new, is then emptied of what deepwell wrote and of the
files carried over; anything else found in it is kept, with a warning.
Hidden folders left by killed runs (their process gone) are cleaned by the
next run into the same folder.

Every refusal is a one-line :class:`~deepwell.core.errors.OutputError`.
"""

import ctypes
import errno
import hashlib
import json
import logging
import os
import re
import shutil
import signal
import stat
import tempfile
import time
from contextlib import contextmanager
from pathlib import Path, PurePosixPath

from deepwell.core.errors import OutputError
from deepwell.core.version import __version__

__all__ = ["MANIFEST", "prepare_output", "install_output", "discard_output", "staged_output",
           "read_manifest"]

log = logging.getLogger("deepwell")

#: Name of the manifest file deepwell writes into every report folder.
MANIFEST = ".deepwell-manifest.json"
_TMP, _OLD = "deepwell-tmp", "deepwell-old"
#: Marker of a staging folder that holds only what this run wrote (and links to files
#: still in the final folder): removed just before the folder is put in place.
_STAGING = ".deepwell-staging"
_HEX = re.compile(r"[0-9a-f]{64}")
_CONTROL = re.compile(r"[\x00-\x1f\x7f]")
_AT_FDCWD, _RENAME_EXCHANGE = -100, 2
_MAX_MANIFEST_BYTES = 16 * 2**20  # a report of many thousand files has a manifest of ~1 MB


# ----------------------------------------------------------------- small helpers
def _digest(path):
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            h.update(block)
    return h.hexdigest()


def _lstat(path):
    """``os.lstat`` or None when the path does not exist (never follows a link)."""
    try:
        return os.lstat(path)
    except FileNotFoundError:
        return None
    except OSError as exc:
        raise OutputError(f"{path}: cannot be examined: {exc.strerror}") from None


def _is_empty(folder):
    try:
        with os.scandir(folder) as it:
            return next(it, None) is None
    except OSError as exc:
        raise OutputError(f"{folder}: cannot be read: {exc.strerror}") from None


def _stem(final):
    """Prefix of the hidden siblings of ``final`` (short, unique per folder name)."""
    tag = hashlib.sha256(os.fsencode(final.name)).hexdigest()[:8]
    return f".{final.name[:60]}.{tag}."


def _sibling(final, kind):
    """A new hidden sibling folder of ``final`` named after this process."""
    return Path(tempfile.mkdtemp(prefix=f"{_stem(final)}{kind}-{os.getpid()}-",
                                 dir=final.parent))


def _final(final_dir):
    return Path(os.path.abspath(os.fspath(final_dir)))


def _safe_relative(name, final):
    """A manifest entry as a relative path that stays inside ``final``."""
    p = PurePosixPath(name) if isinstance(name, str) else None
    if (p is None or not name or p.is_absolute() or ".." in p.parts or "." in name.split("/")
            or "//" in name or name.endswith("/") or _CONTROL.search(name)
            or p.name == MANIFEST):
        raise OutputError(f"{final / MANIFEST}: invalid entry {name!r}; "
                          "remove the folder by hand or choose another one")
    return p


# ----------------------------------------------------------------- the manifest
def read_manifest(final_dir):
    """Files deepwell wrote into ``final_dir``: {relative posix path: sha256}, or None.

    Returns None when the folder has no manifest (it was not made by deepwell).
    Every entry must be a plain relative path inside the folder with a SHA-256
    hex digest; the manifest itself must be a regular file (not a link).
    """
    final = Path(final_dir)
    path = final / MANIFEST
    st = _lstat(path)
    if st is None:
        return None
    try:
        if not stat.S_ISREG(st.st_mode) or st.st_size > _MAX_MANIFEST_BYTES:
            raise TypeError
        data = json.loads(path.read_text(encoding="utf-8"))
        files = data["files"]
        if not isinstance(files, dict):
            raise TypeError
    except (OSError, ValueError, KeyError, TypeError):
        raise OutputError(f"{path}: unreadable deepwell manifest; remove the folder by hand "
                          "or choose another one") from None
    out = {}
    for k, v in files.items():
        rel = str(_safe_relative(k, final))
        if not isinstance(v, str) or not _HEX.fullmatch(v):
            raise OutputError(f"{path}: entry {k!r} has no SHA-256 digest; remove the folder "
                              "by hand or choose another one")
        out[rel] = v
    return out


def _write_manifest(folder, files):
    data = {"software": {"name": "deepwell", "version": __version__},
            "note": "files written by deepwell; --replace removes exactly these",
            "files": {f: _digest(folder / f) for f in files}}
    (folder / MANIFEST).write_text(json.dumps(data, indent=2) + "\n", encoding="utf-8")


# ------------------------------------------------------------ checks before a run
def _check_target(final, replace):
    """Refuse early what can be refused before anything is written."""
    st = _lstat(final)
    if st is not None and stat.S_ISLNK(st.st_mode):
        raise OutputError(f"{final}: is a symbolic link; give the folder itself (deepwell "
                          "swaps the report folder into place and never follows links)")
    if st is not None and not stat.S_ISDIR(st.st_mode):
        raise OutputError(f"{final}: exists and is not a folder")
    cwd = Path(os.path.abspath(os.getcwd()))
    if final == cwd or final in cwd.parents:
        raise OutputError(f"{final}: is the current folder or holds it; name a folder "
                          "inside it, e.g. --out report")
    if st is None:
        return
    if os.path.ismount(final):
        raise OutputError(f"{final}: is a mount point; the report is swapped into place by "
                          "renaming, so name a folder inside it")
    if not os.access(final, os.R_OK | os.W_OK | os.X_OK):
        raise OutputError(f"{final}: folder is not readable and writable")
    if _is_empty(final):
        return
    manifest = read_manifest(final)
    if manifest is None and not replace:
        raise OutputError(f"{final}: folder is not empty and was not made by deepwell; "
                          "choose another folder (or --replace to add files beside the "
                          "foreign ones, never overwriting them)")
    if manifest is not None and not replace:
        raise OutputError(f"{final}: holds an earlier report; use --replace")
    for name in manifest or {}:
        _walk_inside(final, name)


def _walk_inside(final, rel, listed=True):
    """lstat every component of ``rel`` under ``final``; refuse links and files on the way.

    Returns the stat of the entry itself, or None if it (or a parent) is absent.
    ``listed``: ``rel`` is a manifest entry (else a file of the new report).
    """
    parts = PurePosixPath(rel).parts
    path = final
    for i, part in enumerate(parts):
        path = path / part
        st = _lstat(path)
        if st is None:
            return None
        last = i == len(parts) - 1
        if stat.S_ISLNK(st.st_mode):
            what = f"the manifest lists {rel} through it" if listed else f"in the way of {rel}"
            raise OutputError(f"{path}: is a symbolic link inside the report folder ({what}); "
                              "deepwell never follows links there; remove it by hand")
        if not last and not stat.S_ISDIR(st.st_mode):
            if listed:
                raise OutputError(f"{path}: is not a folder, but the manifest lists {rel} "
                                  "under it; remove it by hand or choose another folder")
            raise OutputError(f"{path}: not written by deepwell and in the way of {rel}; "
                              "refusing to overwrite it")
    return st


def _check_unmodified(final, ours):
    for name, digest in ours.items():
        st = _walk_inside(final, name)
        if st is None:
            continue
        path = final / name
        if not stat.S_ISREG(st.st_mode) or _digest(path) != digest:
            raise OutputError(f"{path}: changed since deepwell wrote it; move it away "
                              "before replacing the report")


def _clashes(final, new_files, ours):
    """Refuse if a new file would land on (or under) something deepwell did not write."""
    for name in new_files:
        st = _walk_inside(final, name, listed=False)
        if st is not None and name not in ours:
            raise OutputError(f"{final / name}: not written by deepwell; refusing to "
                              "overwrite it")


def _tree(folder):
    """(files, empty folders) under ``folder`` as relative posix paths; links not followed."""
    files, empty = [], []

    def walk(path, rel):
        try:
            with os.scandir(path) as it:
                entries = sorted(it, key=lambda e: e.name)
        except OSError as exc:
            raise OutputError(f"{path}: cannot be read: {exc.strerror}") from None
        if not entries and rel:
            empty.append(rel[:-1])
        for e in entries:
            if e.is_dir(follow_symlinks=False):
                walk(e.path, f"{rel}{e.name}/")
            else:
                files.append(f"{rel}{e.name}")

    walk(folder, "")
    return files, empty


# ------------------------------------------------------------- leftovers of killed runs
def _alive(pid):
    if pid == os.getpid():
        return True
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except OSError:
        return True
    return True


def _leftovers(final):
    """Hidden siblings of ``final`` left by runs whose process is gone: [(kind, path)]."""
    found = []
    stem = _stem(final)
    try:
        names = os.listdir(final.parent)
    except OSError:
        return found
    for name in sorted(names):
        for kind in (_TMP, _OLD):
            m = re.fullmatch(re.escape(f"{stem}{kind}-") + r"(\d+)-.+", name)
            path = final.parent / name
            st = _lstat(path)
            if m and st is not None and stat.S_ISDIR(st.st_mode) and not _alive(int(m[1])):
                found.append((kind, path))
    return found


def _recover(final):
    """Put back an old report left aside by a killed swap; clean other leftovers."""
    for kind, path in _leftovers(final):
        if kind == _OLD and _lstat(final) is None:
            os.rename(path, final)
            log.warning("%s: restored the earlier report left aside by an interrupted run",
                        final)
        elif kind == _TMP and _lstat(path / _STAGING) is not None:
            shutil.rmtree(path, ignore_errors=True)  # killed before installing: all ours
        else:
            _clear_aside(path, final)


def _same(a, sta, b):
    """Whether entry ``b`` (under the new folder) holds what ``a`` holds."""
    stb = _lstat(b)
    if stb is None:
        return False
    if os.path.samestat(sta, stb):
        return True
    if stat.S_ISLNK(sta.st_mode) and stat.S_ISLNK(stb.st_mode):
        return os.readlink(a) == os.readlink(b)
    return (stat.S_ISREG(sta.st_mode) and stat.S_ISREG(stb.st_mode)
            and sta.st_size == stb.st_size and _digest(a) == _digest(b))


def _clear_aside(folder, final):
    """Empty a set-aside report folder of what deepwell wrote and of files also in ``final``.

    Anything else (e.g. a file added to the old folder during the run) is kept
    in ``folder``, with a warning naming it.
    """
    try:
        ours = read_manifest(folder) or {}
    except OutputError:
        ours = {}
    files, _ = _tree(folder)
    for rel in [f for f in files if f != MANIFEST] + [MANIFEST]:  # the manifest last
        path = folder / rel
        st = _lstat(path)
        if st is not None and (rel == MANIFEST or rel in ours or _same(path, st, final / rel)):
            os.unlink(path)
    for dirpath, _, _ in sorted(os.walk(folder), key=lambda w: -len(w[0])):
        try:
            os.rmdir(dirpath)
        except OSError:
            pass
    if _lstat(folder) is not None:  # never removed blindly: give it a visible name
        kept = final.parent / f"{final.name}.kept-{time.strftime('%Y%m%dT%H%M%S')}-{os.getpid()}"
        try:
            os.rename(folder, kept)
        except OSError:
            kept = folder
        log.warning("%s: kept; it holds files of the earlier folder that are not in %s (added "
                    "while the run went on?); move them back by hand", kept, final)


# ----------------------------------------------------------------- public interface
def prepare_output(final_dir, replace=False):
    """Check the final folder and create a temporary sibling to write into.

    Leftovers of earlier runs into the same folder that were killed are
    cleaned first (an old report left aside is put back).

    Parameters
    ----------
    final_dir : str or Path
        Where the report should end up.
    replace : bool, optional
        Allow replacing an earlier deepwell report, or adding to a foreign
        folder without overwriting any foreign file.

    Returns
    -------
    Path
        A new empty folder beside ``final_dir``; pass it to :func:`install_output`
        when complete, or to :func:`discard_output` on failure.

    Raises
    ------
    OutputError
        If the final folder cannot be used under these rules.
    """
    final = _final(final_dir)
    if os.path.isdir(final.parent):
        try:
            _recover(final)
        except OSError as exc:
            raise OutputError(f"{final}: cannot clean up after an earlier run: "
                              f"{exc.strerror}") from None
    _check_target(final, replace)
    try:
        final.parent.mkdir(parents=True, exist_ok=True)
        tmp = _sibling(final, _TMP)
        # mkdtemp makes the folder private (0700); give it the usual permissions
        umask = os.umask(0)
        os.umask(umask)
        os.chmod(tmp, 0o777 & ~umask)
        (tmp / _STAGING).write_text("deepwell staging folder\n", encoding="utf-8")
    except OSError as exc:
        raise OutputError(f"{final}: cannot create a folder beside it: {exc.strerror}") from None
    return tmp


def discard_output(tmp_dir):
    """Remove a temporary folder made by :func:`prepare_output` (after a failed run)."""
    tmp = Path(tmp_dir)
    st = _lstat(tmp)
    if st is not None and stat.S_ISDIR(st.st_mode) and f".{_TMP}-" in tmp.name:
        shutil.rmtree(tmp, ignore_errors=True)


def install_output(tmp_dir, final_dir, replace=False):
    """Put a complete report from ``tmp_dir`` in place of ``final_dir`` under the safety rules.

    Parameters
    ----------
    tmp_dir : str or Path
        Folder returned by :func:`prepare_output`, now holding every file.
    final_dir : str or Path
        Destination folder.
    replace : bool, optional
        As for :func:`prepare_output`.

    Returns
    -------
    list of str
        Relative paths of the installed files (the new manifest).

    Raises
    ------
    OutputError
        On any refusal; then ``final_dir`` is unchanged and ``tmp_dir`` is removed.
    """
    tmp, final = Path(tmp_dir), _final(final_dir)
    aside = None
    try:
        _check_target(final, replace)  # the folder may have changed during the run
        files = [f for f in _tree(tmp)[0] if f not in (MANIFEST, _STAGING)]
        st = _lstat(final)
        empty = st is None or _is_empty(final)
        if not empty:
            ours = read_manifest(final) or {}
            _clashes(final, files, ours)
            _check_unmodified(final, ours)
        _write_manifest(tmp, files)
        if empty:
            _unlink_marker(tmp)
            with _signals_held():
                os.replace(tmp, final)  # a missing or empty folder: one rename
            return files
        _carry_foreign(final, tmp, ours)
        if st is not None:
            shutil.copymode(final, tmp)
        _unlink_marker(tmp)
        with _signals_held():
            aside = _swap(tmp, final)
    except OSError as exc:
        raise OutputError(f"{final}: could not install the report: {exc}") from None
    finally:
        if aside is None:
            discard_output(tmp)
    _clear_aside(aside, final)
    return files


# ----------------------------------------------------------------- the swap
def _unlink_marker(tmp):
    """From here on a killed run's folder is cleaned with care (it may hold the old one)."""
    try:
        os.unlink(tmp / _STAGING)
    except FileNotFoundError:
        pass


def _carry_foreign(final, tmp, ours):
    """Link (or copy) every entry of ``final`` deepwell did not write into ``tmp``."""
    files, empty = _tree(final)
    made = []
    for rel in empty:
        _mkdirs(tmp, rel, made)
    for rel in files:
        if rel == MANIFEST or rel in ours:
            continue
        parent = str(PurePosixPath(rel).parent)
        if parent != ".":
            _mkdirs(tmp, parent, made)
        src, dst = final / rel, tmp / rel
        st = os.lstat(src)
        try:
            os.link(src, dst, follow_symlinks=False)
        except OSError:
            if stat.S_ISLNK(st.st_mode):
                os.symlink(os.readlink(src), dst)
            elif stat.S_ISREG(st.st_mode):
                shutil.copy2(src, dst)
            else:
                raise OutputError(f"{src}: cannot be carried into the new report folder "
                                  "(not a file and cannot be linked); move it away") from None
    for rel in reversed(made):  # the folders' own modes, once their files are in
        os.chmod(tmp / rel, stat.S_IMODE(os.lstat(final / rel).st_mode))


def _mkdirs(tmp, rel, made):
    """Create folder ``rel`` (and its parents) in ``tmp``; append the new ones to ``made``."""
    path = tmp
    for part in PurePosixPath(rel).parts:
        path = path / part
        if _lstat(path) is None:
            os.mkdir(path)
            made.append(path.relative_to(tmp).as_posix())


def _libc_renameat2():
    try:
        libc = ctypes.CDLL(None, use_errno=True)
        return libc.renameat2
    except (OSError, AttributeError):
        return None


def _exchange(a, b):
    """Exchange two folders in one step (Linux renameat2); False where not supported."""
    fn = _libc_renameat2()
    if fn is None:
        return False
    if fn(_AT_FDCWD, os.fsencode(a), _AT_FDCWD, os.fsencode(b), _RENAME_EXCHANGE) == 0:
        return True
    err = ctypes.get_errno()
    if err in (errno.ENOSYS, errno.EINVAL, errno.ENOTSUP, errno.EOPNOTSUPP):
        return False
    raise OSError(err, os.strerror(err), str(b))


def _swap(tmp, final):
    """Put ``tmp`` at ``final``; return where the old folder now is."""
    if _exchange(tmp, final):
        return tmp
    aside = _sibling(final, _OLD)
    os.rename(final, aside)  # onto the empty folder just made
    try:
        os.rename(tmp, final)
    except OSError:
        os.rename(aside, final)
        raise
    return aside


@contextmanager
def _signals_held():
    """Hold SIGTERM and SIGINT during a swap (so no Python handler runs halfway)."""
    held = {signal.SIGTERM, signal.SIGINT}
    old = signal.pthread_sigmask(signal.SIG_BLOCK, held)
    try:
        yield
    finally:
        signal.pthread_sigmask(signal.SIG_SETMASK, old)


@contextmanager
def staged_output(final_dir, replace=False):
    """Context manager: yield a temporary folder, install it on success, discard on error.

    Examples
    --------
    >>> with staged_output("report") as folder:   # doctest: +SKIP
    ...     write_report(result, folder)
    """
    tmp = prepare_output(final_dir, replace)
    try:
        yield tmp
    except BaseException:
        discard_output(tmp)
        raise
    install_output(tmp, final_dir, replace)
