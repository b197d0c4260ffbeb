"""Files in and out: an output file written all or nothing (into a temporary file beside it, then
moved into place), and input files read and decoded as UTF-8 with messages that name the file,
the line and the fix."""

from __future__ import annotations

import contextlib
import os
import tempfile
from collections.abc import Iterator
from pathlib import Path

from fewshot.errors import FewshotError, InvalidInput

__all__ = ["decode_utf8", "read_text", "replacing", "write_text_atomic"]


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


def decode_utf8(
    data: bytes, where: str | Path, *, what: str, error: type[FewshotError] = InvalidInput
) -> str:
    """``data`` as UTF-8 text, without a leading byte-order mark (some editors write one).

    Bytes that are not UTF-8 raise ``error`` naming ``where``, the line and the byte, and asking
    for the ``what`` (e.g. "study file") to be saved as UTF-8.
    """
    try:
        text = data.decode("utf-8")
    except UnicodeDecodeError as exc:
        line = data[: exc.start].count(b"\n") + 1
        raise error(
            f"{where}, line {line}: not valid UTF-8 (byte 0x{data[exc.start]:02x}). "
            f"Save the {what} as UTF-8."
        ) from None
    return text[1:] if text.startswith("\ufeff") else text


def read_text(
    path: str | Path, *, what: str, error: type[FewshotError] = InvalidInput, missing: str = ""
) -> str:
    """The UTF-8 text of the file at ``path`` (see :func:`decode_utf8`); a missing or unreadable
    file raises ``error`` naming the ``what``. ``missing`` adds a hint to the not-found message."""
    p = Path(path)
    try:
        data = p.read_bytes()
    except FileNotFoundError:
        raise error(f"{p}: {what} not found. Check the path{missing}.") from None
    except IsADirectoryError:
        raise error(f"{p}: is a folder, not a {what}. Give the file.") from None
    except OSError as exc:
        raise error(f"{p}: cannot read the {what} ({exc.strerror}).") from None
    return decode_utf8(data, p, what=what, error=error)
