"""Publishing output files whole: write under a temporary name beside the final one, then rename.

An interrupted or failed run therefore never leaves a half-written file under a final name.
Every temporary this process creates is remembered until it is renamed into place or removed,
so the command line can sweep up whatever an interruption left behind
(:func:`remove_temporaries`). Inside :func:`all_or_nothing`, finished files are held back
under their temporary names and renamed together only when the whole job succeeded: a run
stopped after the video but before the log leaves neither.
"""

from __future__ import annotations

import contextlib
import contextvars
import os
import signal
import tempfile
import threading
from collections.abc import Iterator
from pathlib import Path

from ..errors import StabilizeError

__all__ = [
    "TEMP_MARK", "all_or_nothing", "check_writable_folder", "discard", "publish",
    "naming_errors", "remove_temporaries", "temp_path_for", "write_text_atomic",
]

#: Every temporary name that ends up on disk contains this, so a folder can be checked for
#: leftovers with ``glob("*.partial*")``.
TEMP_MARK = ".partial"

_lock = threading.Lock()
_live: set[Path] = set()
_staged: contextvars.ContextVar[list[tuple[Path, Path]] | None] = contextvars.ContextVar(
    "stabilize_staged_outputs", default=None
)


def temp_path_for(final: Path) -> Path:
    """A fresh, empty temporary file beside ``final``, keeping its extension.

    Parameters
    ----------
    final : the name the finished file will have; its folder must exist.

    Returns
    -------
    The temporary's path (``.<stem>.<random>.partial<suffix>``), remembered until it is
    published or discarded.

    Raises
    ------
    StabilizeError
        When ``final``'s folder does not take new files.
    """
    final = Path(final)
    try:
        fd, name = tempfile.mkstemp(
            prefix=f".{final.stem}.", suffix=TEMP_MARK + final.suffix, dir=final.parent
        )
    except OSError as exc:
        raise StabilizeError(f"{final}: cannot write here ({exc.strerror})") from None
    tmp = Path(name)
    with _lock:
        _live.add(tmp)
    os.close(fd)
    return tmp


def discard(tmp: Path) -> None:
    """Remove a temporary (if it is still there) and forget it.

    Parameters
    ----------
    tmp : a path from :func:`temp_path_for`.
    """
    with _lock:
        _live.discard(tmp)
    with contextlib.suppress(FileNotFoundError):
        tmp.unlink()


def remove_temporaries() -> list[Path]:
    """Remove every temporary of this process that was not renamed into place; returns them.

    Called by the command line when a run fails or is interrupted; a no-op after a clean run.

    Returns
    -------
    The temporaries still remembered (each removed if it was on disk), sorted.
    """
    with _lock:
        left = sorted(_live)
        _live.clear()
    for tmp in left:
        with contextlib.suppress(OSError):
            tmp.unlink()
    return left


def _rename(tmp: Path, final: Path) -> None:
    umask = os.umask(0)
    os.umask(umask)
    os.chmod(tmp, 0o666 & ~umask)
    os.replace(tmp, final)
    with _lock:
        _live.discard(tmp)


def publish(tmp: Path, final: Path) -> None:
    """Give ``tmp`` ordinary permissions and rename it over ``final`` in one step.

    Inside :func:`all_or_nothing` the rename waits for the end of the job: ``tmp`` is moved to
    another temporary name (so the caller's usual ``if tmp.exists(): tmp.unlink()`` clean-up
    does not remove the finished file) and renamed over ``final`` when the job succeeds.

    Parameters
    ----------
    tmp : the finished temporary (from :func:`temp_path_for`).
    final : the name it is to have.
    """
    staged = _staged.get()
    if staged is None:
        _rename(tmp, final)
        return
    held = temp_path_for(final)
    os.replace(tmp, held)
    with _lock:
        _live.discard(tmp)
    staged.append((held, final))


@contextlib.contextmanager
def all_or_nothing() -> Iterator[None]:
    """Hold back every :func:`publish` in the block; rename them all when it succeeds.

    On any exception (an interruption included) the held files are removed and nothing
    appears under a final name. When the block runs on the main thread, the renames
    themselves run with SIGINT and SIGTERM blocked, so an interruption cannot split them; it
    takes effect right after (on other threads they are not blocked). A nested block adds its
    files to the outer one's.

    Yields
    ------
    None
    """
    if _staged.get() is not None:  # nested: the outer block decides
        yield
        return
    staged: list[tuple[Path, Path]] = []
    token = _staged.set(staged)
    try:
        yield
    except BaseException:
        for held, _ in staged:
            discard(held)
        raise
    finally:
        _staged.reset(token)
    blocked = _block_interrupts()
    try:
        for held, final in staged:
            _rename(held, final)
    finally:
        for held, _ in staged:
            discard(held)  # only those a failed rename left behind
        if blocked:
            signal.pthread_sigmask(signal.SIG_UNBLOCK, {signal.SIGINT, signal.SIGTERM})


def _block_interrupts() -> bool:
    if threading.current_thread() is not threading.main_thread():
        return False
    signal.pthread_sigmask(signal.SIG_BLOCK, {signal.SIGINT, signal.SIGTERM})
    return True


def write_text_atomic(final: Path, text: str) -> None:
    """Write a whole text file so that it appears complete or not at all.

    Parameters
    ----------
    final : the file's name.
    text : its whole content, written as UTF-8 with line endings as given.
    """
    tmp = temp_path_for(final)
    try:
        with naming_errors(final), open(tmp, "w", encoding="utf-8", newline="") as fh:
            fh.write(text)
        publish(tmp, final)
    finally:
        if tmp.exists():
            discard(tmp)


@contextlib.contextmanager
def naming_errors(final: Path) -> Iterator[None]:
    """Give an ``OSError`` raised inside (a full disk, a lost drive) the name of the file
    being written, ``final``, when the system did not name one.

    Parameters
    ----------
    final : the file the block writes (under a temporary name).
    """
    try:
        yield
    except OSError as exc:
        if exc.filename is None or ".partial" in str(exc.filename):
            raise OSError(exc.errno, exc.strerror or str(exc), str(final)) from None
        raise


def check_writable_folder(path: Path) -> None:
    """Refuse early, before any work, when ``path``'s folder cannot take new files.

    Permission bits do not stop the superuser, so the test that counts is whether a file can
    really be created there: a temporary is made and removed at once.

    Parameters
    ----------
    path : an output file to be written later.

    Raises
    ------
    StabilizeError
        Naming ``path`` when its folder is missing, is a file, or takes no new files.
    """
    folder = path.parent if str(path.parent) else Path(".")
    if not folder.exists():
        raise StabilizeError(f"{path}: output folder {folder} does not exist")
    if not folder.is_dir():
        raise StabilizeError(f"{path}: {folder} is a file, not a folder")
    discard(temp_path_for(path))
