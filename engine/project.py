"""The project file: our own JSON format (``.lwd``), versioned, saved atomically.

Blocks are listed with their names; wires refer to ports as ``"block.port"``, so a file
stays readable and hand-editable. Internal ids are given in file order when loading.
The structure is described by ``resources/diagram.schema.json``.

Loading checks structure only (JSON, our format, known kinds, wires between existing
ports). A diagram whose parameters are wrong still opens, so the app can show what is
wrong; :func:`loopwright.engine.validation.problems` reports it.
"""
from __future__ import annotations

import json
import os
import tempfile
from pathlib import Path
from typing import Any

from loopwright.engine.diagram import BLOCK_KINDS, Diagram
from loopwright.engine.errors import EngineError, FormatVersionError, ProjectFileError

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


def atomic_write(path: str | os.PathLike, data: str | bytes) -> None:
    """Write ``data`` to ``path`` so that a crash leaves either the old file or the new one.

    The text goes to a temporary file in the same folder, is flushed to disk, then renamed
    over the target (``os.replace`` is atomic on POSIX and Windows).
    """
    p = Path(path)
    if not p.parent.is_dir():
        raise FileNotFoundError(2, f"folder {p.parent} does not exist", str(p.parent))
    mode = "wb" if isinstance(data, bytes) else "w"
    fd, tmp = tempfile.mkstemp(prefix=f".{p.name}.", suffix=".tmp", dir=p.parent if str(p.parent) else ".")
    try:
        with os.fdopen(fd, mode, **({} if isinstance(data, bytes) else {"encoding": "utf-8", "newline": "\n"})) as fh:
            fh.write(data)
            fh.flush()
            os.fsync(fh.fileno())
        if p.exists():
            os.chmod(tmp, p.stat().st_mode & 0o777)
        else:
            os.chmod(tmp, 0o644)
        os.replace(tmp, p)
    except BaseException:
        try:
            os.unlink(tmp)
        except FileNotFoundError:
            pass
        raise


def save(diagram: Diagram, path: str | os.PathLike) -> None:
    """Write ``diagram`` to ``path`` atomically (see :func:`atomic_write`).

    Raises
    ------
    ProjectFileError
        The folder is missing or not writable, or a parameter is not JSON-serialisable.
    """
    try:
        text = dumps(diagram)
    except (TypeError, ValueError) as err:
        raise ProjectFileError(f"{path}: cannot be saved, a parameter is not plain numbers/text ({err})") from err
    try:
        atomic_write(path, text)
    except OSError as err:
        raise ProjectFileError(f"{path}: cannot be written ({err.strerror or err})") from err
