"""Atomic file output: write to a temporary name in the same folder, then rename.

A reader (a map viewer reloading a file, a script polling a folder) never sees half a file, and a
failed run leaves no partial output behind.
"""

from __future__ import annotations

import os
import tempfile
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path

# The process umask, read once at import (os.umask can only be read by setting it).
_UMASK = os.umask(0o022)
os.umask(_UMASK)


@contextmanager
def atomic_path(path: str | Path) -> Iterator[Path]:
    """Yield a temporary path beside ``path``; rename it over ``path`` when the block succeeds.

    The temporary name is hidden and ends in ``.part`` (``.track.csv.abc123.part``): writers that
    infer the format or append an extension from the name (``savefig``, ``np.savez``, pandas
    ``compression="infer"``) must be given the format explicitly. The file gets the usual
    permissions (0666 minus the umask), not mkstemp's 0600. The temporary file is removed when the
    block raises.
    """
    target = Path(path)
    target.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp_name = tempfile.mkstemp(prefix=f".{target.name}.", suffix=".part", dir=target.parent)
    os.close(fd)
    tmp = Path(tmp_name)
    try:
        yield tmp
        if tmp.exists():
            os.chmod(tmp, 0o666 & ~_UMASK)
        os.replace(tmp, target)
    except BaseException:
        tmp.unlink(missing_ok=True)
        raise


def atomic_write_bytes(path: str | Path, data: bytes) -> Path:
    """Write ``data`` to ``path`` atomically and return the path."""
    with atomic_path(path) as tmp:
        tmp.write_bytes(data)
    return Path(path)


def atomic_write_text(path: str | Path, text: str) -> Path:
    """Write UTF-8 ``text`` to ``path`` atomically (LF line ends) and return the path."""
    return atomic_write_bytes(path, text.encode("utf-8"))
