"""One atomic, race-free way to write an output file.

Every file qgforce writes (NetCDF results, PNG maps, the demo marker) is first written to a
temporary file in the target's own directory, then moved onto the target in one step, so a reader
never sees a half-written file and a failed run leaves nothing behind.

* The temporary name is ``.<target name>.<pid>-<random>.tmp``: the writing process's id is in the
  name, so a temporary file left by a process that died without cleaning up (``kill -9``, a power
  cut) is recognised as *stale* and removed by the next write to the same target.
* The final move does not replace a file that appeared after the write started, unless
  ``overwrite=True``: without it the move is ``os.link`` then ``os.unlink`` of the temporary name
  (``link`` fails when the target exists: exclusive), so of two processes racing to one new path
  exactly one wins and the other gets :class:`ConcurrentWriteError`.
* Temporary files are removed on any exception (``KeyboardInterrupt`` included) and on SIGTERM: a
  handler installed on first use removes the live temporary files of this process and then lets
  the previous handler (by default: termination by the signal) act.

References
----------
POSIX.1-2017, ``link()`` (fails with EEXIST when the new name exists) and ``rename()`` (replaces
the new name atomically within one file system).
"""

from __future__ import annotations

import contextlib
import errno
import os
import secrets
import signal
import threading
from collections.abc import Iterator, Sequence
from pathlib import Path

from ..errors import QGForceError

__all__ = ["ConcurrentWriteError", "atomic_path", "atomic_paths", "temporary_name", "remove_stale"]

_PREFIX = "."
_SUFFIX = ".tmp"

#: Temporary files of this process not yet moved or removed (what the SIGTERM handler cleans).
_LIVE: set[str] = set()
_LIVE_LOCK = threading.Lock()
_HANDLER_INSTALLED = False


class ConcurrentWriteError(QGForceError, FileExistsError):
    """Another writer created the target while this one was writing it (or it existed and may not be replaced)."""


def temporary_name(target: Path) -> Path:
    """The temporary path of one write to ``target``: ``.<name>.<pid>-<random>.tmp`` beside it."""
    return target.with_name(f"{_PREFIX}{target.name}.{os.getpid()}-{secrets.token_hex(4)}{_SUFFIX}")


def _pid_alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:  # a live process of another user
        return True
    return True


def remove_stale(target: Path) -> list[Path]:
    """Remove the temporary files of ``target`` left by processes that no longer run.

    Returns
    -------
    list of pathlib.Path
        The files removed.
    """
    directory = target.parent if str(target.parent) else Path(".")
    head = f"{_PREFIX}{target.name}."
    removed = []
    with contextlib.suppress(OSError):
        for entry in os.scandir(directory):
            name = entry.name
            if not (name.startswith(head) and name.endswith(_SUFFIX)):
                continue
            pid_text = name[len(head):-len(_SUFFIX)].split("-", 1)[0]
            if not pid_text.isdigit() or int(pid_text) == os.getpid() or _pid_alive(int(pid_text)):
                continue
            with contextlib.suppress(FileNotFoundError):
                os.unlink(entry.path)
                removed.append(Path(entry.path))
    return removed


def _on_sigterm(signum, frame):  # pragma: no cover - exercised in a subprocess by the tests
    _cleanup_live()
    previous = _PREVIOUS.get(signum, signal.SIG_DFL)
    if callable(previous):
        previous(signum, frame)
        return
    signal.signal(signum, signal.SIG_DFL)
    os.kill(os.getpid(), signum)


_PREVIOUS: dict = {}


def _install_handler() -> None:
    """Install the SIGTERM cleanup once, from the main thread (signals can only be set there)."""
    global _HANDLER_INSTALLED
    if _HANDLER_INSTALLED or threading.current_thread() is not threading.main_thread():
        return
    previous = signal.getsignal(signal.SIGTERM)
    if previous is signal.SIG_IGN:
        _HANDLER_INSTALLED = True
        return
    _PREVIOUS[signal.SIGTERM] = previous
    signal.signal(signal.SIGTERM, _on_sigterm)
    _HANDLER_INSTALLED = True


def _cleanup_live() -> None:
    with _LIVE_LOCK:
        live = list(_LIVE)
        _LIVE.clear()
    for tmp in live:
        with contextlib.suppress(OSError):
            os.unlink(tmp)


def _discard(tmp: Path) -> None:
    with _LIVE_LOCK:
        _LIVE.discard(os.fspath(tmp))
    with contextlib.suppress(FileNotFoundError):
        os.unlink(tmp)


def _commit(tmp: Path, target: Path, overwrite: bool, existed: bool) -> None:
    """Move ``tmp`` onto ``target``: atomic replace with ``overwrite``, else exclusive (link + unlink)."""
    if overwrite:
        os.replace(tmp, target)
        return
    try:
        os.link(tmp, target)
    except FileExistsError:
        when = "existed before the write started" if existed else "appeared while this process was writing it"
        raise ConcurrentWriteError(
            f"{str(target)!r} {when} (another run writing the same file?); nothing was replaced. Remove it, "
            "choose another name, or allow replacing it (overwrite=True, --overwrite)") from None
    except OSError as exc:  # a file system without hard links: reserve the name exclusively, then replace
        if exc.errno not in (errno.EPERM, errno.ENOTSUP, errno.EOPNOTSUPP, errno.EXDEV, errno.EMLINK):
            raise
        try:
            os.close(os.open(target, os.O_CREAT | os.O_EXCL | os.O_WRONLY))
        except FileExistsError:
            raise ConcurrentWriteError(
                f"{str(target)!r} appeared while this process was writing it; nothing was replaced") from None
        os.replace(tmp, target)
        return
    os.unlink(tmp)


@contextlib.contextmanager
def atomic_paths(targets: Sequence, *, overwrite: bool = False, fsync: bool = True) -> Iterator[list[Path]]:
    """Context manager yielding temporary paths for several targets, moved onto them on success.

    Parameters
    ----------
    targets : sequence of str or os.PathLike
        The final files; their directories must exist.
    overwrite : bool
        Replace a target that exists when the move happens.  Without it a target that exists then
        (created by another writer after this one started, or before) raises
        :class:`ConcurrentWriteError` and is left untouched.
    fsync : bool
        Flush each temporary file to disk before the move.

    Yields
    ------
    list of pathlib.Path
        One temporary path per target, in the same directory (nothing is created yet).

    Raises
    ------
    ConcurrentWriteError
        See ``overwrite``.  The targets moved before the failing one stay in place; the remaining
        temporary files are removed.

    Notes
    -----
    Stale temporary files of each target (left by a process that is no longer running) are removed
    first.  On any exception, and on SIGTERM, this write's temporary files are removed.
    """
    paths = [Path(os.path.expanduser(os.fspath(t))) for t in targets]
    _install_handler()
    for target in paths:
        remove_stale(target)
    existed = [t.exists() for t in paths]
    tmps = [temporary_name(t) for t in paths]
    with _LIVE_LOCK:
        _LIVE.update(os.fspath(t) for t in tmps)
    try:
        yield tmps
        if fsync:
            for tmp in tmps:
                with contextlib.suppress(FileNotFoundError), open(tmp, "rb+") as fh:
                    os.fsync(fh.fileno())
        for tmp, target, before in zip(tmps, paths, existed):
            _commit(tmp, target, overwrite, before)
            with _LIVE_LOCK:
                _LIVE.discard(os.fspath(tmp))
    finally:
        for tmp in tmps:
            _discard(tmp)


@contextlib.contextmanager
def atomic_path(target, *, overwrite: bool = False, fsync: bool = True) -> Iterator[Path]:
    """Context manager yielding one temporary path beside ``target``, moved onto it on success.

    See :func:`atomic_paths` for the parameters and the guarantees.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> folder = pathlib.Path(tempfile.mkdtemp())
    >>> with atomic_path(folder / "note.txt") as tmp:
    ...     _ = tmp.write_text("done")
    >>> (folder / "note.txt").read_text(), sorted(p.name for p in folder.iterdir())
    ('done', ['note.txt'])
    """
    with atomic_paths([target], overwrite=overwrite, fsync=fsync) as tmps:
        yield tmps[0]
