"""The project file: our own JSON format (``.lwd``), versioned, saved atomically.

Blocks are listed with their names; wires refer to ports as ``"block.port"``, so a file
stays readable and hand-editable. Internal ids are given in file order when loading.
The structure is described by ``resources/diagram.schema.json``.

Loading checks structure only (JSON, our format, known kinds, wires between existing
ports). A diagram whose parameters are wrong still opens, so the app can show what is
wrong; :func:`loopwright.engine.validation.problems` reports it.
"""
from __future__ import annotations

import errno
import json
import os
import re
import stat
import tempfile
import time
from pathlib import Path
from typing import Any

from loopwright.engine.diagram import BLOCK_KINDS, Diagram
from loopwright.engine.errors import EngineError, FormatVersionError, ProjectFileError
from loopwright.engine.output_paths import display_path, require_writable

try:
    import fcntl
except ImportError:  # Windows: no advisory locks; see _remove_stale_temps
    fcntl = None

__all__ = ["FORMAT_NAME", "FORMAT_VERSION", "FILE_SUFFIX", "load", "loads", "save", "dumps", "to_dict", "from_dict", "atomic_write"]

FORMAT_NAME = "loopwright-diagram"
FORMAT_VERSION = 1
FILE_SUFFIX = ".lwd"


def to_dict(diagram: Diagram) -> dict[str, Any]:
    """The JSON-native form of ``diagram``."""
    blocks = []
    for b in diagram.blocks.values():
        entry: dict[str, Any] = {"name": b.name, "kind": b.kind, "params": b.params, "layout": b.layout}
        if b.caption:
            entry["caption"] = b.caption
        blocks.append(entry)
    wires = []
    for w in diagram.wires.values():
        entry = {
            "signal": w.name,
            "from": diagram.port_label(w.source),
            "to": [diagram.port_label(t) for t in w.targets],
        }
        if w.layout:
            entry["layout"] = w.layout
        wires.append(entry)
    return {
        "format": FORMAT_NAME,
        "version": FORMAT_VERSION,
        "meta": diagram.meta,
        "settings": diagram.settings,
        "blocks": blocks,
        "wires": wires,
    }


def dumps(diagram: Diagram) -> str:
    """Serialise to text; ``loads(dumps(d))`` gives back an equal diagram."""
    return json.dumps(to_dict(diagram), indent=2, ensure_ascii=False, allow_nan=False) + "\n"


def _field(obj: dict, key: str, kind: type | tuple, where: str, *, default: Any = ...) -> Any:
    if key not in obj:
        if default is not ...:
            return default
        raise ProjectFileError(f"{where}: missing field {key!r}")
    val = obj[key]
    if not isinstance(val, kind) or isinstance(val, bool) and kind is not bool:
        names = kind.__name__ if isinstance(kind, type) else " or ".join(k.__name__ for k in kind)
        raise ProjectFileError(f"{where}: field {key!r} must be {_article(names)}, got {type(val).__name__}")
    return val


def _article(name: str) -> str:
    return {"dict": "an object", "list": "a list", "str": "a string", "int": "a whole number"}.get(name, name)


def from_dict(data: Any, *, origin: str = "project file") -> Diagram:
    """Build a :class:`Diagram` from the JSON-native form.

    Raises
    ------
    FormatVersionError
        Written by a newer Loopwright.
    ProjectFileError
        Not our format, or a malformed field (named, with the block or wire it belongs to).
    """
    if not isinstance(data, dict):
        raise ProjectFileError(f"{origin}: not a Loopwright diagram (the top level must be a JSON object)")
    if data.get("format") != FORMAT_NAME:
        raise ProjectFileError(f"{origin}: not a Loopwright diagram (format is {data.get('format')!r}, expected {FORMAT_NAME!r})")
    version = data.get("version")
    if not isinstance(version, int) or isinstance(version, bool) or version < 1:
        raise ProjectFileError(f"{origin}: version {version!r} is not a positive whole number")
    if version > FORMAT_VERSION:
        raise FormatVersionError(
            f"{origin}: written by a newer Loopwright (file format {version}, this version reads up to {FORMAT_VERSION}); "
            "update Loopwright to open it"
        )
    d = Diagram()
    d.meta = _field(data, "meta", dict, origin, default={})
    d.settings = _field(data, "settings", dict, origin, default={})
    for k, entry in enumerate(_field(data, "blocks", list, origin), 1):
        where = f"{origin}: block #{k}"
        if not isinstance(entry, dict):
            raise ProjectFileError(f"{where} must be an object")
        name = _field(entry, "name", str, where)
        where = f"{origin}: block {name!r}"
        kind = _field(entry, "kind", str, where)
        if kind not in BLOCK_KINDS:
            raise ProjectFileError(f"{where}: unknown block kind {kind!r} (known: {', '.join(BLOCK_KINDS)})")
        params = _field(entry, "params", dict, where)
        layout = _field(entry, "layout", dict, where, default={})
        caption = _field(entry, "caption", str, where, default="")
        try:
            d.add_block(kind, name, params, layout=layout, caption=caption)
        except EngineError as err:
            raise ProjectFileError(f"{where}: {err.message}") from err
        # keep the layout exactly as written, so load-then-save gives the same file
        d.blocks[next(reversed(d.blocks))].layout = layout
    for k, entry in enumerate(_field(data, "wires", list, origin), 1):
        where = f"{origin}: wire #{k}"
        if not isinstance(entry, dict):
            raise ProjectFileError(f"{where} must be an object")
        signal = _field(entry, "signal", str, where)
        where = f"{origin}: wire {signal!r}"
        src = _field(entry, "from", str, where)
        targets = _field(entry, "to", list, where)
        if not targets:
            raise ProjectFileError(f"{where}: 'to' lists no input port")
        wid = None
        for t in targets:
            if not isinstance(t, str):
                raise ProjectFileError(f"{where}: each entry of 'to' must be 'block.port'")
            try:
                wid = d.connect(src, t, name=signal)
            except EngineError as err:
                raise ProjectFileError(f"{where}: {err.message}") from err
        if d.wires[wid].name != signal:
            raise ProjectFileError(f"{where}: a second wire leaves {src}; one output port carries one wire (list every target in 'to')")
        layout = _field(entry, "layout", dict, where, default=None)
        if layout is not None:
            d.wires[wid].layout = layout
    return d


def loads(text: str, *, origin: str = "project file") -> Diagram:
    """Parse project-file text; see :func:`from_dict` for the errors."""
    try:
        data = json.loads(text)
    except json.JSONDecodeError as err:
        raise ProjectFileError(f"{origin}: not valid JSON (line {err.lineno}, column {err.colno}: {err.msg})") from err
    return from_dict(data, origin=origin)


def load(path: str | os.PathLike) -> Diagram:
    """Read a project file.

    Raises
    ------
    ProjectFileError
        Missing, unreadable, not JSON, not ours, malformed (see :func:`from_dict`).
    """
    p = Path(path)
    try:
        text = p.read_text(encoding="utf-8")
    except FileNotFoundError as err:
        raise ProjectFileError(f"{p}: no such file") from err
    except IsADirectoryError as err:
        raise ProjectFileError(f"{p}: is a folder, not a diagram file") from err
    except (OSError, UnicodeDecodeError) as err:
        raise ProjectFileError(f"{p}: cannot be read ({err.__class__.__name__}: {err})") from err
    return loads(text, origin=str(p))


# A save writes ".NAME.XXXXXXXX.tmp" beside NAME (``tempfile.mkstemp``: eight characters
# from its alphabet), holds an exclusive lock on it until the rename, then renames it over
# NAME. A process killed in between leaves that file behind; the next save removes it.
_TEMP_RANDOM = r"[a-z0-9_]{8}"
# Where file locks are not available, a temporary file untouched for this long belongs to
# no running save (a save of even a very large diagram takes well under a second).
_STALE_TEMP_AGE_S = 600.0


def _temp_name_pattern(name: str) -> re.Pattern[str]:
    return re.compile(r"\." + re.escape(name) + r"\." + _TEMP_RANDOM + r"\.tmp")


def _try_lock(fd: int) -> bool | None:
    """Exclusive, non-blocking lock: True got it, False another process holds it, None no locks here."""
    if fcntl is None:
        return None
    try:
        fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
    except OSError as err:
        if err.errno in (errno.EWOULDBLOCK, errno.EAGAIN, errno.EACCES):
            return False
        return None  # e.g. a network file system without flock
    return True


def _reserve_temp(target: Path) -> tuple[int, str]:
    """Create and lock the temporary file of a save of ``target``; returns (fd, path)."""
    for _ in range(8):
        fd, tmp = tempfile.mkstemp(prefix=f".{target.name}.", suffix=".tmp", dir=target.parent)
        # Between mkstemp and the lock another save's clean-up may have taken the new file
        # for a leftover: then it is locked by that clean-up or already gone; take a new name.
        if _try_lock(fd) is not False:
            try:
                if os.stat(tmp).st_ino == os.fstat(fd).st_ino:
                    return fd, tmp
            except FileNotFoundError:
                pass
        os.close(fd)
    raise BlockingIOError(errno.EBUSY, "no temporary file could be reserved beside it", str(target))


def _remove_stale_temps(target: Path) -> None:
    """Remove what interrupted saves of ``target`` left beside it.

    Safe because only names our own save makes for this very file name are looked at
    (``.NAME.`` + mkstemp's eight characters + ``.tmp``), only regular files, and only
    those no running save uses: every save holds an exclusive lock on its temporary file
    until it has been renamed, and the system drops that lock when the process ends, even
    when it is killed. A file we can lock is therefore a leftover. Where locks are not
    available (some network file systems, Windows) a file must also be untouched for
    ``_STALE_TEMP_AGE_S``; on Windows a file still open elsewhere cannot be removed anyway.
    """
    pattern = _temp_name_pattern(target.name)
    try:
        names = os.listdir(target.parent)
    except OSError:
        return
    for name in names:
        if not pattern.fullmatch(name):
            continue
        leftover = target.parent / name
        try:
            st = os.lstat(leftover)
            if not stat.S_ISREG(st.st_mode):
                continue
            fd = os.open(leftover, os.O_RDONLY | getattr(os, "O_NOFOLLOW", 0))
        except OSError:
            continue
        try:
            locked = _try_lock(fd)
            stale = os.fstat(fd).st_ino == st.st_ino and (
                locked is True or (locked is None and time.time() - st.st_mtime >= _STALE_TEMP_AGE_S))
        except OSError:
            stale = False
        finally:
            os.close(fd)  # (Windows cannot remove a file that is open, even by us)
        if stale:
            # the name cannot be taken again while the file exists, so this is the file judged above
            try:
                os.unlink(leftover)
            except OSError:
                pass  # gone already, or still open elsewhere: the next save tries again


def _fsync_folder(folder: Path) -> None:
    """Make the rename itself durable (POSIX); a no-op where folders cannot be synced."""
    if os.name != "posix":
        return
    try:
        fd = os.open(folder, os.O_RDONLY | getattr(os, "O_DIRECTORY", 0))
    except OSError:
        return
    try:
        os.fsync(fd)
    except OSError:
        pass  # some file systems refuse fsync on a folder (EINVAL); the data itself is synced
    finally:
        os.close(fd)


def atomic_write(path: str | os.PathLike, data: str | bytes) -> None:
    """Write ``data`` to ``path`` so that a crash leaves either the old file or the new one.

    The text goes to a temporary file in the same folder, is flushed to disk, then renamed
    over the target (``os.replace`` is atomic on POSIX and Windows) and the folder is
    synced. A symbolic link is followed: its target gets the new text and the link stays.
    A read-only file, or a file in a read-only folder, is refused, not replaced. Temporary
    files that interrupted saves of the same file left behind are removed.

    Raises
    ------
    OSError
        The file cannot be written; ``strerror`` says why in one line (see
        :func:`loopwright.engine.output_paths.require_writable`).
    """
    target = require_writable(path)
    payload = data if isinstance(data, bytes) else data.encode("utf-8")
    fd, tmp = _reserve_temp(target)
    try:
        try:
            view = memoryview(payload)
            while view:
                view = view[os.write(fd, view):]
            os.fsync(fd)
            os.chmod(tmp, target.stat().st_mode & 0o777 if target.exists() else 0o644)
            if fcntl is None:
                # Windows cannot rename an open file; it has no lock to keep either
                os.close(fd)
                fd = -1
            # renamed while still locked, so no clean-up of another save takes it first
            os.replace(tmp, target)
        finally:
            if fd >= 0:
                os.close(fd)
    except BaseException:
        try:
            os.unlink(tmp)
        except FileNotFoundError:
            pass
        raise
    _remove_stale_temps(target)
    _fsync_folder(target.parent)


def save(diagram: Diagram, path: str | os.PathLike) -> None:
    """Write ``diagram`` to ``path`` atomically (see :func:`atomic_write`).

    A symbolic link is followed (the file it points to is updated, the link stays); a
    read-only file is refused, not replaced.

    Raises
    ------
    ProjectFileError
        The folder is missing or not writable, the file is read-only or a folder, or a
        parameter is not JSON-serialisable.
    """
    shown = display_path(path)
    try:
        text = dumps(diagram)
    except (TypeError, ValueError) as err:
        raise ProjectFileError(f"{shown}: cannot be saved, a parameter is not plain numbers/text ({err})") from err
    try:
        atomic_write(path, text)
    except OSError as err:
        raise ProjectFileError(f"{shown}: cannot be written ({err.strerror or err})") from err
