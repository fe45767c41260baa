"""A safe report folder: written aside, moved into place only when complete.

A report is first written into a temporary sibling of the final folder
(:func:`prepare_output`) and moved into place by :func:`install_output` once
every file exists. deepwell records the files it wrote in a manifest,
``.deepwell-manifest.json``, with their SHA-256 digests. The rules:

* a missing or empty final folder is simply created;
* a non-empty folder without a manifest (not made by deepwell) is refused,
  unless ``replace=True``; even then no file deepwell did not write is ever
  deleted or overwritten (a clash is refused, naming the file);
* a folder deepwell made is refused without ``replace=True`` ("holds an
  earlier report"); with it, exactly the files of the old manifest are
  removed before the new files move in;
* a run that fails before installing removes its temporary folder and leaves
  the final folder untouched (:func:`staged_output` does this for you).

Every refusal is a one-line :class:`~deepwell.core.errors.OutputError`.
"""

import hashlib
import json
import os
import shutil
import tempfile
from contextlib import contextmanager
from pathlib import Path, PurePosixPath

from deepwell.core.errors import OutputError
from deepwell.core.version import __version__

__all__ = ["MANIFEST", "prepare_output", "install_output", "discard_output", "staged_output",
           "read_manifest"]

#: Name of the manifest file deepwell writes into every report folder.
MANIFEST = ".deepwell-manifest.json"


def _digest(path):
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            h.update(block)
    return h.hexdigest()


def _safe_relative(name, final):
    """A manifest entry as a relative path that stays inside ``final``."""
    p = PurePosixPath(name)
    if not name or p.is_absolute() or ".." in p.parts or p.name == MANIFEST:
        raise OutputError(f"{final / MANIFEST}: invalid entry {name!r}; "
                          "remove the folder by hand or choose another one")
    return p


def read_manifest(final_dir):
    """Files deepwell wrote into ``final_dir``: {relative posix path: sha256}, or None.

    Returns None when the folder has no manifest (it was not made by deepwell).
    """
    final = Path(final_dir)
    path = final / MANIFEST
    if not path.is_file():
        return None
    try:
        data = json.loads(path.read_text(encoding="utf-8"))
        files = data["files"]
        if not isinstance(files, dict):
            raise TypeError
    except (OSError, ValueError, KeyError, TypeError):
        raise OutputError(f"{path}: unreadable deepwell manifest; remove the folder by hand "
                          "or choose another one") from None
    return {str(_safe_relative(k, final)): str(v) for k, v in files.items()}


def _check_target(final, replace):
    """Refuse early what can be refused before anything is written."""
    if final.exists() and not final.is_dir():
        raise OutputError(f"{final}: exists and is not a folder")
    if not final.is_dir() or not any(final.iterdir()):
        return
    manifest = read_manifest(final)
    if manifest is None and not replace:
        raise OutputError(f"{final}: folder is not empty and was not made by deepwell; "
                          "choose another folder (or --replace to add files beside the "
                          "foreign ones, never overwriting them)")
    if manifest is not None and not replace:
        raise OutputError(f"{final}: holds an earlier report; use --replace")


def prepare_output(final_dir, replace=False):
    """Check the final folder and create a temporary sibling to write into.

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
    final = Path(final_dir)
    _check_target(final, replace)
    parent = final.absolute().parent
    try:
        parent.mkdir(parents=True, exist_ok=True)
        tmp = tempfile.mkdtemp(prefix=f".{final.name}.deepwell-tmp-", dir=parent)
        # mkdtemp makes the folder private (0700); give it the usual permissions
        umask = os.umask(0)
        os.umask(umask)
        os.chmod(tmp, 0o777 & ~umask)
    except OSError as exc:
        raise OutputError(f"{final}: cannot create a folder beside it: {exc.strerror}") from None
    return Path(tmp)


def discard_output(tmp_dir):
    """Remove a temporary folder made by :func:`prepare_output` (after a failed run)."""
    tmp = Path(tmp_dir)
    if tmp.is_dir() and ".deepwell-tmp-" in tmp.name:
        shutil.rmtree(tmp, ignore_errors=True)


def _new_files(tmp):
    files = sorted(p.relative_to(tmp).as_posix() for p in tmp.rglob("*")
                   if p.is_file() or p.is_symlink())
    return [f for f in files if f != MANIFEST]


def _write_manifest(folder, files):
    data = {"software": {"name": "deepwell", "version": __version__},
            "note": "files written by deepwell; --replace removes exactly these",
            "files": {f: _digest(folder / f) for f in files}}
    (folder / MANIFEST).write_text(json.dumps(data, indent=2) + "\n", encoding="utf-8")


def _clashes(final, new_files, ours):
    """Refuse if a new file would land on (or under) something deepwell did not write."""
    for name in new_files:
        parts = PurePosixPath(name).parts
        for i in range(1, len(parts)):  # parent folders must be folders
            sub = final.joinpath(*parts[:i])
            if sub.exists() and not sub.is_dir():
                raise OutputError(f"{sub}: not written by deepwell and in the way of "
                                  f"{name}; refusing to overwrite it")
        target = final / name
        if (target.exists() or target.is_symlink()) and name not in ours:
            raise OutputError(f"{target}: not written by deepwell; refusing to overwrite it")


def _check_unmodified(final, ours):
    for name, digest in ours.items():
        path = final / name
        if path.is_file() and not path.is_symlink() and _digest(path) != digest:
            raise OutputError(f"{path}: changed since deepwell wrote it; move it away "
                              "before replacing the report")


def install_output(tmp_dir, final_dir, replace=False):
    """Move a complete report from ``tmp_dir`` into ``final_dir`` under the safety rules.

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
    tmp, final = Path(tmp_dir), Path(final_dir)
    try:
        _check_target(final, replace)  # the folder may have changed during the run
        files = _new_files(tmp)
        if not final.is_dir() or not any(final.iterdir()):
            _write_manifest(tmp, files)
            if final.is_dir():
                final.rmdir()
            os.replace(tmp, final)
            return files
        ours = read_manifest(final) or {}
        _clashes(final, files, ours)
        _check_unmodified(final, ours)
        _swap(tmp, final, files, ours)
        return files
    finally:
        discard_output(tmp)


def _swap(tmp, final, files, ours):
    """Set aside the old manifest files, move the new ones in; undo on failure."""
    old = [n for n in ours if (final / n).exists() or (final / n).is_symlink()]
    attic = Path(tempfile.mkdtemp(prefix=f".{final.name}.deepwell-tmp-old-", dir=tmp.parent))
    moved_old, moved_new = [], []
    try:
        for name in [*old, MANIFEST]:
            src = final / name
            if src.exists() or src.is_symlink():
                (attic / name).parent.mkdir(parents=True, exist_ok=True)
                os.replace(src, attic / name)
                moved_old.append(name)
        for name in files:
            (final / name).parent.mkdir(parents=True, exist_ok=True)
            os.replace(tmp / name, final / name)
            moved_new.append(name)
        _write_manifest(final, files)
    except OSError as exc:
        for name in moved_new:
            os.replace(final / name, tmp / name)
        for name in moved_old:
            os.replace(attic / name, final / name)
        raise OutputError(f"{final}: could not install the report: {exc}") from None
    _remove_empty_parents(final, [n for n in old if n not in files])
    shutil.rmtree(attic, ignore_errors=True)


def _remove_empty_parents(final, removed):
    """Remove sub-folders left empty by removed report files (never ``final`` itself)."""
    parents = {final.joinpath(*PurePosixPath(n).parts[:i])
               for n in removed for i in range(1, len(PurePosixPath(n).parts))}
    for folder in sorted(parents, key=lambda p: len(p.parts), reverse=True):
        if folder.is_dir() and not any(folder.iterdir()):
            folder.rmdir()


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
