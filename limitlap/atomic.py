"""Writing files safely: each file atomically, and a run's folder as one set.

:func:`write_atomic` writes a file whole to a temporary name in its own folder, flushes
it to disk and moves it into place with :func:`os.replace` (atomic on POSIX and
Windows). :func:`output_set` gives a run a fresh folder beside its target and swaps it
in whole at the end, so a reader never finds files of two runs together and a failed
run leaves the earlier set whole (docs/outputs.md, Output folder). Only
:mod:`limitlap.outputs` and :mod:`limitlap.sheets` write through these.
"""

from __future__ import annotations

import contextlib
import dataclasses
import errno
import json
import os
import re
import shutil
import tempfile
import time
import uuid
from collections.abc import Iterator
from pathlib import Path

from limitlap.errors import InputError


def write_atomic(path, data: bytes | str) -> Path:
    r"""Write ``data`` to ``path`` atomically: temp file in the same folder, fsync, replace.

    Parameters
    ----------
    path : str or Path
        Destination file; its folder must exist.
    data : bytes or str
        Content; text is written as UTF-8 with ``\n`` line ends.

    Returns
    -------
    Path
        The destination.

    Raises
    ------
    InputError
        Naming the folder when it is missing or cannot be written; any file already at
        ``path`` is left as it was.
    """
    path = Path(path)
    folder = path.parent
    payload = data.encode("utf-8") if isinstance(data, str) else bytes(data)
    if not folder.is_dir():
        problem = "is not a folder" if folder.exists() else "output folder does not exist"
        raise InputError(folder, problem)
    try:
        fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=folder)
    except OSError as err:
        raise InputError(folder, f"output folder cannot be written: {err.strerror or err}") from err
    try:
        with os.fdopen(fd, "wb") as fh:
            fh.write(payload)
            fh.flush()
            os.fsync(fh.fileno())
        umask = os.umask(0)
        os.umask(umask)
        os.chmod(tmp, 0o666 & ~umask)  # mkstemp makes 0600; give the usual file mode
        os.replace(tmp, path)
    except OSError as err:
        with contextlib.suppress(OSError):
            os.unlink(tmp)
        raise InputError(folder, f"cannot write {path.name}: {err.strerror or err}") from err
    except BaseException:
        with contextlib.suppress(OSError):
            os.unlink(tmp)
        raise
    _sync_folder(folder)  # make the rename durable
    return path


#: The list of a set's files, written last into its folder (docs/outputs.md, Output folder).
SET_MANIFEST = ".limitlap-set.json"


SET_SCHEMA = "limitlap.set/1"


#: Names written by versions before the manifest, so their folders are still replaced.
_EARLIER_NAMES = re.compile(
    r"(summary\.json|profile\.csv|envelope\.toml|report\.html|targets\.csv"
    r"|(speed|time_delta|time_left|map|gg|data_check|best_of_laps|corner_\d+)\.png"
    r"|targets_[a-z0-9_]+\.(pdf|png)|\..+\.tmp)"
)


@dataclasses.dataclass(frozen=True)
class OutputSet:
    """A run's fresh folder beside its target; swapped in whole by :func:`output_set`.

    Attributes
    ----------
    folder : Path
        The fresh folder the run writes into (same parent, hidden temporary name). [-]
    target : Path
        The output folder as the user named it. [-]
    """

    folder: Path
    target: Path

    def write(self, name: str, data: bytes | str) -> Path:
        """Write one file of the set (:func:`write_atomic`); its path in the target [-]."""
        try:
            write_atomic(self.folder / name, data)
        except InputError as err:
            raise InputError(self.target, err.problem) from None
        return self.target / name


def _foreign_entries(folder: Path) -> list[str]:
    """Entries of ``folder`` that are not a limitlap set's (manifest, or earlier names)."""
    names = sorted(p.name for p in folder.iterdir())
    listed: set[str] = set()
    with contextlib.suppress(OSError, ValueError, TypeError, AttributeError):
        listed = set(json.loads((folder / SET_MANIFEST).read_text(encoding="utf-8"))["files"])
        listed.add(SET_MANIFEST)
    return [
        n
        for n in names
        if n not in listed and not (_EARLIER_NAMES.fullmatch(n) and (folder / n).is_file())
    ]


def _refuse_foreign(foreign: list[str], shown) -> None:
    if foreign:
        raise InputError(
            shown,
            f"holds files limitlap did not write ({', '.join(foreign[:3])}); "
            "name a new or empty output folder",
        )


def _check_target(target: Path, shown) -> None:
    """Refuse a target that is a file or holds files limitlap did not write.

    Another run may be swapping the folder while it is read (its listing and its
    manifest then come from two sets): only what every one of a few looks finds is
    refused. The check that nothing foreign is removed is :func:`_swap_in`'s.
    """
    if target.exists() and not target.is_dir():
        raise InputError(shown, "is a file, not an output folder")
    if not target.parent.is_dir():
        raise InputError(shown, "output folder cannot be made: its parent folder does not exist")
    foreign = None
    for _ in range(20):
        try:
            seen = set(_foreign_entries(target))
        except FileNotFoundError:  # missing, or between another run's renames
            seen = set()
        foreign = seen if foreign is None else foreign & seen
        if not foreign:
            return
        time.sleep(0.005)
    _refuse_foreign(sorted(foreign), shown)


def _swap_in(folder: Path, target: Path) -> list[Path]:
    """Rename ``folder`` to ``target``, the earlier set moved aside first; the sets aside.

    ``rename`` onto a missing or empty folder is atomic; onto a full one it fails, so the
    full one is renamed aside and the rename tried again. Another run swapping at the
    same moment only sends the loop round once more: the last rename wins whole.
    """
    aside: list[Path] = []
    for _ in range(100):
        try:
            os.rename(folder, target)
            return aside
        except OSError as err:
            if err.errno not in (errno.EEXIST, errno.ENOTEMPTY):
                raise
        old = target.with_name(f".{target.name}.old-{uuid.uuid4().hex[:12]}")
        try:
            os.rename(target, old)
        except FileNotFoundError:
            continue  # another run is between its two renames
        aside.append(old)
        foreign = _foreign_entries(old)  # aside, nobody else's to change now
        if foreign:
            _put_back(old, target, aside)
            _refuse_foreign(foreign, target)
        try:
            os.rename(folder, target)
            return aside
        except OSError as err:
            if err.errno in (errno.EEXIST, errno.ENOTEMPTY):
                continue  # another run's set came in between: round again
            _put_back(old, target, aside)
            raise
        except BaseException:
            _put_back(old, target, aside)
            raise
    raise OSError(errno.EBUSY, "other runs kept replacing it")


def _put_back(old: Path, target: Path, aside: list[Path]) -> None:
    """The earlier set back in place after a failed swap (kept aside if that fails too)."""
    with contextlib.suppress(OSError):
        os.rename(old, target)
        aside.remove(old)


@contextlib.contextmanager
def output_set(out_dir) -> Iterator[OutputSet]:
    """A fresh folder for a run's files, swapped in for ``out_dir`` when the block ends.

    Parameters
    ----------
    out_dir : str, Path or OutputSet
        The output folder (its parent must exist; made when missing), or a set already
        open, which is handed back as it is (its owner swaps it in). [-]

    Yields
    ------
    OutputSet
        Write every file through :meth:`OutputSet.write`. [-]

    Raises
    ------
    InputError
        Naming ``out_dir`` when it is a file, its parent is missing or not writable, or it
        holds files limitlap did not write (they would be replaced with the set).

    Notes
    -----
    A failed run removes its fresh folder: the earlier set stays whole. On success a
    manifest of the files is written last, the earlier set is renamed aside, the new
    folder renamed in and the earlier one removed, so a reader finds one run's files, or
    (for the moment between the two renames) none (docs/outputs.md, Output folder).
    """
    if isinstance(out_dir, OutputSet):
        yield out_dir
        return
    target = Path(out_dir).resolve()
    _check_target(target, out_dir)
    try:
        folder = Path(tempfile.mkdtemp(prefix=f".{target.name}.new-", dir=target.parent))
    except OSError as err:
        raise InputError(out_dir, f"output folder cannot be made: {err.strerror or err}") from err
    aside: list[Path] = []
    try:
        umask = os.umask(0)
        os.umask(umask)
        os.chmod(folder, 0o777 & ~umask)  # mkdtemp makes 0700; give the usual folder mode
        staged = OutputSet(folder, Path(out_dir))
        yield staged
        files = sorted(p.name for p in folder.iterdir())
        manifest = {"schema": SET_SCHEMA, "run": uuid.uuid4().hex, "files": files}
        staged.write(SET_MANIFEST, json.dumps(manifest, indent=2) + "\n")
        try:
            aside = _swap_in(folder, target)
        except InputError as err:
            raise InputError(out_dir, err.problem) from None
        except OSError as err:
            raise InputError(
                out_dir, f"cannot put the new files in place: {err.strerror or err}"
            ) from err
        _sync_folder(target.parent)
    finally:
        shutil.rmtree(folder, ignore_errors=True)  # gone already when swapped in
        for old in aside:
            shutil.rmtree(old, ignore_errors=True)


def _sync_folder(folder: Path) -> None:
    """Make renames in ``folder`` durable (POSIX; a no-op where folders cannot be opened)."""
    with contextlib.suppress(OSError, AttributeError):
        dir_fd = os.open(folder, os.O_RDONLY)
        try:
            os.fsync(dir_fd)
        finally:
            os.close(dir_fd)
