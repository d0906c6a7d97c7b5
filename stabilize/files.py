"""Safe output files: write under a temporary name in the destination folder, then rename.

An interrupted or failed run therefore never leaves a half-written file under a final name.
"""

from __future__ import annotations

import os
import tempfile
from pathlib import Path

from .errors import StabilizeError


def temp_path_for(final: Path) -> Path:
    """A fresh, empty temporary file beside ``final``, keeping its extension."""
    try:
        fd, name = tempfile.mkstemp(
            prefix=f".{final.stem}.", suffix=".partial" + final.suffix, dir=final.parent
        )
    except OSError as exc:
        raise StabilizeError(f"{final}: cannot write here ({exc.strerror})") from None
    os.close(fd)
    return Path(name)


def publish(tmp: Path, final: Path) -> None:
    """Give ``tmp`` ordinary permissions and rename it over ``final`` in one step."""
    umask = os.umask(0)
    os.umask(umask)
    os.chmod(tmp, 0o666 & ~umask)
    os.replace(tmp, final)


def write_text_atomic(final: Path, text: str) -> None:
    """Write a whole text file so that it appears complete or not at all."""
    tmp = temp_path_for(final)
    try:
        with open(tmp, "w", encoding="utf-8", newline="") as fh:
            fh.write(text)
        publish(tmp, final)
    finally:
        if tmp.exists():
            tmp.unlink()


def check_writable_folder(path: Path) -> None:
    """Refuse early, before any work, when ``path``'s folder cannot take new files."""
    folder = path.parent if str(path.parent) else Path(".")
    if not folder.is_dir():
        raise StabilizeError(f"{path}: output folder {folder} does not exist")
    if not os.access(folder, os.W_OK | os.X_OK):
        raise StabilizeError(f"{path}: output folder {folder} is not writable")
