"""Writing an output file all or nothing: into a temporary file beside it, then moved into place."""

from __future__ import annotations

import contextlib
import os
import tempfile
from collections.abc import Iterator
from pathlib import Path

from fewshot.errors import InvalidInput

__all__ = ["replacing", "write_text_atomic"]


@contextlib.contextmanager
def replacing(path: str | Path, *, what: str) -> Iterator[Path]:
    """Yield a temporary path beside ``path``; move it onto ``path`` when the block succeeds and
    remove it otherwise. A folder that is missing or not a folder, or a failed write, is an
    :class:`InvalidInput` naming ``what`` and the path; nothing is left half-written."""
    p = Path(path)
    if not p.parent.is_dir():
        raise InvalidInput(
            f"{p.parent}: no such folder for the {what}. Create it first or pick another path."
        )
    try:
        fd, name = tempfile.mkstemp(prefix=f".{p.stem}.", suffix=p.suffix, dir=p.parent)
    except OSError as exc:
        raise InvalidInput(f"{p}: cannot write the {what} ({exc.strerror}).") from None
    os.close(fd)
    tmp = Path(name)
    try:
        yield tmp
        umask = os.umask(0)
        os.umask(umask)
        os.chmod(tmp, 0o666 & ~umask)  # mkstemp makes files private; outputs are for sharing
        os.replace(tmp, p)
    except OSError as exc:
        raise InvalidInput(f"{p}: cannot write the {what} ({exc.strerror}).") from None
    finally:
        with contextlib.suppress(OSError):
            tmp.unlink()


def write_text_atomic(path: str | Path, text: str, *, what: str) -> Path:
    """Write ``text`` (UTF-8) to ``path`` all or nothing."""
    with replacing(path, what=what) as tmp:
        tmp.write_text(text, encoding="utf-8")
    return Path(path)
