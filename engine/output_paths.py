"""Whether a file may be written: the checks every command that writes makes first.

Two rules keep a user's work safe. A file is replaced only where the user may write it
(never a read-only file, never a folder, never through a folder that is read-only), and an
export never replaces a diagram: not the one being read, not any other diagram file.
Symbolic links are followed, so a link is judged by the file it points to.

The checks are made before anything is written (for a C export: for both the source and
the header), so a refusal leaves no file behind. The messages are one line: a path that
holds a line break or another control character is shown escaped.
"""
from __future__ import annotations

import errno
import os
import unicodedata
from collections.abc import Iterable
from pathlib import Path

from loopwright.engine.errors import EngineError

__all__ = [
    "DIAGRAM_SUFFIX",
    "OutputRefusedError",
    "display_path",
    "has_control_characters",
    "is_diagram_file",
    "require_writable",
    "check_export_output",
    "check_diagram_output",
]

DIAGRAM_SUFFIX = ".lwd"
# A diagram written by us names its format in its first lines; a hand-made one may put the
# key further down, so a few kilobytes are read.
_SNIFF_BYTES = 4096
_DIAGRAM_MARK = b'"loopwright-diagram"'
# Control characters, invisible format characters (bidirectional overrides among them),
# line and paragraph separators, and lone surrogates (bytes that are not UTF-8 in a name).
_CONTROL_CATEGORIES = frozenset({"Cc", "Cf", "Cs", "Zl", "Zp"})


class OutputRefusedError(EngineError, ValueError):
    """An output file is not written: it is the diagram, another diagram, a folder, read-only..."""


def has_control_characters(text: str) -> bool:
    """True if ``text`` holds a character that would break a one-line message or a file name."""
    return any(unicodedata.category(ch) in _CONTROL_CATEGORIES for ch in str(text))


def display_path(path: str | os.PathLike) -> str:
    """``path`` as one printable line: as is when it can be, else Python's escaped form."""
    text = os.fspath(path)
    text = text if isinstance(text, str) else os.fsdecode(text)
    return repr(text) if has_control_characters(text) else text


def _may_write(path: Path) -> bool:
    # The superuser passes os.access for every file; the mode bits still say whether the
    # owner made the file (or folder) read-only, and that wish is kept for everyone.
    try:
        mode = os.stat(path).st_mode
    except OSError:
        return False
    return os.access(path, os.W_OK) and bool(mode & 0o222)


def require_writable(path: str | os.PathLike) -> Path:
    """The real path behind ``path`` (symbolic links followed), if a new file may replace it.

    Raises
    ------
    OSError
        ``IsADirectoryError`` (a folder), ``FileNotFoundError`` (its folder is missing, or
        the link cannot be followed), ``PermissionError`` (the file or its folder is
        read-only), plain ``OSError`` (a device, pipe or socket); ``strerror`` says which
        in one line.
    """
    real = Path(os.path.realpath(path))
    if real.is_symlink():
        raise FileNotFoundError(errno.ELOOP, "it is a symbolic link that cannot be followed", os.fspath(path))
    if real.is_dir():
        raise IsADirectoryError(errno.EISDIR, "it is a folder", os.fspath(path))
    if real.exists() and not real.is_file():
        # a rename would put a regular file in place of a device, pipe or socket
        raise OSError(errno.EINVAL, "it is not a regular file (a device, pipe or socket)", os.fspath(path))
    folder = real.parent
    if not folder.is_dir():
        raise FileNotFoundError(errno.ENOENT, f"folder {display_path(folder)} does not exist", os.fspath(path))
    if real.exists() and not _may_write(real):
        raise PermissionError(errno.EACCES, "the file is read-only; it was not replaced", os.fspath(path))
    if not _may_write(folder):
        raise PermissionError(errno.EACCES, f"folder {display_path(folder)} is read-only", os.fspath(path))
    return real


def is_diagram_file(path: str | os.PathLike) -> bool:
    """True if ``path`` (or the file a link points to) is named ``*.lwd`` or holds a diagram."""
    real = Path(os.path.realpath(path))
    if Path(path).suffix.lower() == DIAGRAM_SUFFIX or real.suffix.lower() == DIAGRAM_SUFFIX:
        return True
    try:
        with open(real, "rb") as fh:
            head = fh.read(_SNIFF_BYTES)
    except OSError:
        return False
    return _DIAGRAM_MARK in head


def _same_file(a: str | os.PathLike, b: str | os.PathLike) -> bool:
    if os.path.realpath(a) == os.path.realpath(b):
        return True
    try:
        return os.path.samefile(a, b)  # hard links and other names of one file
    except OSError:
        return False


def check_export_output(path: str | os.PathLike, *, reading: Iterable[str | os.PathLike] = ()) -> Path:
    """Refuse an export file that would replace a diagram, a folder or a read-only file.

    Parameters
    ----------
    path : path-like
        The file about to be written.
    reading : iterable of path-like
        The diagram file(s) the export is made from.

    Returns
    -------
    Path
        The real path that will be written (links followed).

    Raises
    ------
    OutputRefusedError
        One line naming the output and the reason; nothing has been written.
    """
    shown = display_path(path)
    if has_control_characters(os.fspath(path)):
        raise OutputRefusedError(f"output {shown}: the name holds a line break or another control character; choose another name")
    if os.fspath(path).endswith(("/", os.sep)):
        raise OutputRefusedError(f"output {shown} names a folder; give a file name")
    for source in reading:
        if _same_file(path, source):
            raise OutputRefusedError(f"output {shown} is the diagram being read; an export never replaces a diagram")
    if Path(path).suffix.lower() == DIAGRAM_SUFFIX or (os.path.isfile(path) and is_diagram_file(path)):
        raise OutputRefusedError(f"output {shown} is a diagram file; an export never replaces a diagram (choose .json, .npz or .c)")
    try:
        return require_writable(path)
    except OSError as err:
        raise OutputRefusedError(f"output {shown}: cannot be written ({err.strerror or err})") from err


def check_diagram_output(path: str | os.PathLike) -> Path:
    """Refuse to save a diagram where the file or its folder is read-only, or ``path`` is a folder.

    Raises
    ------
    OutputRefusedError
        One line naming the file and the reason; nothing has been written.
    """
    try:
        return require_writable(path)
    except OSError as err:
        raise OutputRefusedError(f"{display_path(path)}: cannot be written ({err.strerror or err})") from err
