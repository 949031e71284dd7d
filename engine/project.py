"""The project file: our own JSON format (``.lwd``), versioned, saved atomically.

Blocks are listed with their names; wires refer to ports as ``"block.port"``, so a file
stays readable and hand-editable. Internal ids are given in file order when loading.
The structure is described by ``resources/diagram.schema.json``.

Loading refuses a file that breaks the schema (types, names, known fields, widths) or the
rules around it (finite numbers, bounded nesting and size, unique names, wires between
existing ports), with one line naming the JSON path. A diagram whose parameters are well
typed but do not fit together (shapes, widths of connected ports) still opens, so the app
can show what is wrong; :func:`loopwright.engine.validation.problems` reports it.
"""
from __future__ import annotations

import copy
import errno
import functools
import json
import math
import os
import re
import stat
import tempfile
import time
from collections.abc import Sequence
from importlib import resources
from pathlib import Path
from typing import Any

from loopwright.engine.diagram import Diagram
from loopwright.engine.errors import EngineError, FormatVersionError, ProjectFileError
from loopwright.engine.output_paths import display_path, require_writable
from loopwright.engine.validation import MAX_TOTAL_WIDTH, declared_width

try:
    import fcntl
except ImportError:  # Windows: no advisory locks; see _remove_stale_temps
    fcntl = None

__all__ = [
    "FORMAT_NAME", "FORMAT_VERSION", "FILE_SUFFIX", "MAX_NESTING", "load", "loads", "save", "dumps", "to_dict", "from_dict",
    "schema", "atomic_write",
]

FORMAT_NAME = "loopwright-diagram"
FORMAT_VERSION = 1
FILE_SUFFIX = ".lwd"
# A diagram nests at most eight levels (a transfer-function matrix inside a block); the
# bound keeps the JSON decoder and everything after it far from Python's recursion limit.
MAX_NESTING = 40


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


def _parse(text: str, origin: str) -> tuple[Any, bool]:
    """JSON text -> ``(data, odd)``; ``odd``: the text holds NaN, Infinity or an out-of-range number.

    Deep nesting is refused before the decoder recurses into it.
    """
    _refuse_deep_nesting(text, origin)
    odd: list[_NonFinite] = []

    def constant(token: str) -> _NonFinite:
        odd.append(_NonFinite(token))
        return odd[-1]

    def real(token: str) -> float | _NonFinite:
        value = float(token)
        return value if math.isfinite(value) else constant(token)

    def whole(token: str) -> int | _NonFinite:
        try:
            value = int(token)
            float(value)  # a whole number the float range cannot hold is no use to the numerics
        except (ValueError, OverflowError):  # ValueError: beyond Python's digit limit for int()
            return constant(token)
        return value

    try:
        if not _may_hold_out_of_range_number(text):  # the usual case: the C decoder reads every number itself
            return json.loads(text, parse_constant=constant), bool(odd)
        return json.loads(text, parse_constant=constant, parse_float=real, parse_int=whole), bool(odd)
    except json.JSONDecodeError as err:
        raise ProjectFileError(f"{origin}: not valid JSON (line {err.lineno}, column {err.colno}: {err.msg})") from err
    except RecursionError as err:  # unreachable after the nesting check; kept as the last guard
        raise ProjectFileError(f"{origin}: not a Loopwright diagram (nested too deeply to read)") from err


# Text that may hold a number beyond the float range: 309 digits in a row, or an exponent
# of 100 or more. Only then are the numbers parsed one by one to find it. Both are looked
# for in a copy of the bytes that keeps only what they are made of (digits; ``e``, ``E`` as
# ``e``; ``+``), everything else a space: one C pass each, instead of a regular expression
# trying every letter of every name.
_BIG_EXPONENT = re.compile(rb"e\+?0*[1-9][0-9][0-9]")
_EXPONENT_BYTES = bytes(c if 48 <= c <= 57 or c == 43 else 101 if c in (69, 101) else 32 for c in range(256))
_DIGIT_BYTES = bytes(48 if 48 <= c <= 57 else 32 for c in range(256))
_LONG_DIGIT_RUN = b"0" * 309


def _may_hold_out_of_range_number(text: str) -> bool:
    """Whether ``text`` holds a run of 309 digits or an exponent ``e+100`` or more (``E``,
    leading zeros and no ``+`` alike): the only ways a JSON number leaves the float range."""
    raw = text.encode("utf-8", "surrogatepass")
    if _BIG_EXPONENT.search(raw.translate(_EXPONENT_BYTES)):
        return True
    return _LONG_DIGIT_RUN in raw.translate(_DIGIT_BYTES)


class _NonFinite:
    """What the parser makes of ``NaN``, ``Infinity`` and numbers beyond the float range.

    Kept as a marker (not a float) so the checks after parsing can name where it stands.
    """

    def __init__(self, token: str):
        digits = sum(c.isdigit() for c in token)
        self.token = token if len(token) <= 24 else f"{token[:12]}...{token[-6:]} ({digits} digits)"


_NESTING_TOKEN = re.compile(r'[\[\]{}"]')
# every byte but brackets, braces and the quote: deleted before counting the nesting
_NOT_NESTING_BYTES = bytes(c for c in range(256) if c not in b'[]{}"')


def _deepest_nesting_bound(text: str) -> int:
    """The nesting depth of ``[``/``{`` outside strings, counted at C speed.

    Without backslashes every quote opens or closes a string, so a bracket is outside
    every string when an even number of quotes precede it: up to the first place the
    decoder would refuse, this counts exactly what :func:`_refuse_deep_nesting` counts, and
    past it at most more. A text with a backslash gets a bound that sends it to that walk.
    Only the brackets and quotes are counted (the rest is deleted first, in one C pass).
    """
    import numpy as np

    if "\\" in text:  # escapes (rare in a diagram): the token-by-token walk reads them
        return MAX_NESTING + 1
    codes = np.frombuffer(text.encode("utf-8", "surrogatepass").translate(None, _NOT_NESTING_BYTES), dtype=np.uint8)
    if not codes.size:
        return 0
    outside = (np.cumsum(codes == ord('"')) & 1) == 0
    step = ((codes == ord("[")) | (codes == ord("{"))).astype(np.int32) - ((codes == ord("]")) | (codes == ord("}")))
    return max(0, int(np.cumsum(step * outside).max()))


def _refuse_deep_nesting(text: str, origin: str) -> None:
    """Raise when ``[``/``{`` nest deeper than :data:`MAX_NESTING` (counted outside strings).

    Counted in one vectorised pass first; only a text that may nest too deeply is walked
    token by token, to refuse it with its line number.
    """
    if _deepest_nesting_bound(text) <= MAX_NESTING:
        return
    depth, pos = 0, 0
    while found := _NESTING_TOKEN.search(text, pos):
        char, pos = found.group(), found.end()
        if char == '"':
            try:
                pos = json.decoder.scanstring(text, pos)[1]  # the decoder's own string reader, in C
            except ValueError:
                return  # a broken string: the decoder stops there, before any deeper nesting
        elif char in "[{":
            depth += 1
            if depth > MAX_NESTING:
                raise ProjectFileError(
                    f"{origin}: lists or objects nested more than {MAX_NESTING} levels deep "
                    f"(line {text.count(chr(10), 0, found.start()) + 1}); a Loopwright diagram needs fewer than ten"
                )
        else:
            depth -= 1


def _refuse_odd_values(data: Any, origin: str) -> None:
    """Non-finite numbers and over-deep nesting, named by JSON path (also for dicts given directly)."""
    stack: list[tuple[Any, tuple]] = [(data, ())]
    while stack:
        value, path = stack.pop()
        if len(path) > MAX_NESTING:
            raise ProjectFileError(f"{origin}: {_json_path(path)}{_owner(data, path)}: nested more than {MAX_NESTING} levels deep")
        if isinstance(value, dict):
            stack.extend((v, (*path, k)) for k, v in reversed(value.items()))
        elif isinstance(value, list):
            stack.extend((v, (*path, k)) for k, v in reversed(list(enumerate(value))))
        elif isinstance(value, _NonFinite) or isinstance(value, float) and not math.isfinite(value):
            token = value.token if isinstance(value, _NonFinite) else repr(value)
            raise ProjectFileError(
                f"{origin}: {_json_path(path)}{_owner(data, path)}: {token} is not a finite number "
                "(a diagram holds finite numbers only, at most about 1.8e308 in size)"
            )


def _json_path(path: Sequence[Any]) -> str:
    """``("blocks", 3, "params", "A")`` -> ``blocks[3].params.A``."""
    out = ""
    for part in path:
        if isinstance(part, int):
            out += f"[{part}]"
        elif _PLAIN_KEY.fullmatch(part):
            out += f".{part}" if out else part
        else:
            out += f"[{_show(part)}]"
    return out or "the top level"


_PLAIN_KEY = re.compile(r"[A-Za-z_][A-Za-z0-9_]*")


def _owner(data: Any, path: Sequence[Any]) -> str:
    """`` (block 'P')`` or `` (wire 'u')`` for a path inside one, else ``""``."""
    if len(path) < 2 or path[0] not in ("blocks", "wires") or not isinstance(path[1], int):
        return ""
    try:
        entry = data[path[0]][path[1]]
    except (LookupError, TypeError):
        return ""
    key, noun = ("name", "block") if path[0] == "blocks" else ("signal", "wire")
    name = entry.get(key) if isinstance(entry, dict) else None
    return f" ({noun} {_show(name)})" if isinstance(name, str) else ""


def _show(value: Any) -> str:
    """A value as the message shows it: short, on one line."""
    if value is None:
        return "null"
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, dict):
        return "an object"
    if isinstance(value, list):
        return "an empty list" if not value else "a list"
    text = repr(value)
    return text if len(text) <= 42 else f"{text[:30]}...{text[-8:]}"


# Values (objects and lists) already found valid against a subschema, keyed by the
# subschema's id and a frozen copy of the value: a diagram repeats the same parameters,
# layouts and matrices many times over (a chain of unit gains), and validation is a pure
# function of (schema, value). Only small values are frozen (a big matrix is scanned by
# the number loop anyway); the set is cleared when it grows past _VALID_SEEN_MAX.
_VALID_SEEN: set = set()
_VALID_SEEN_MAX = 200_000
_FREEZE_MAX_LEAVES = 64


class _TooBig(Exception):
    pass


def _frozen(value: Any) -> Any:
    """A hashable copy of a small JSON value that tells apart everything validation can
    (``1``, ``1.0`` and ``true`` stay distinct), or None for a big one."""
    budget = [_FREEZE_MAX_LEAVES]

    def freeze(v):
        if isinstance(v, dict):
            return ("o", tuple(sorted((k, freeze(x)) for k, x in v.items())))
        if isinstance(v, list):
            return ("a", tuple(freeze(x) for x in v))
        budget[0] -= 1
        if budget[0] < 0:
            raise _TooBig
        return (type(v).__name__, v)

    try:
        return freeze(value)
    except (_TooBig, TypeError):
        return None


@functools.cache
def _validator():
    """A validator for :func:`schema`, made faster without changing what it accepts.

    ``$ref`` s are resolved once here rather than at every value, and a list whose items
    must be plain numbers is scanned in one loop, with the per-item machinery run only for
    an item that fails (so its error reads as usual). Matrices hold most of a file's values.
    A block's ``allOf`` of ``if kind == X then ...`` branches runs only the branch of the
    block's own kind (the others cannot apply), and a small object or list already found
    valid against the same subschema is not walked again (:data:`_VALID_SEEN`); a value
    with errors is always walked, so every error reads as usual.
    """
    import jsonschema
    from jsonschema import validators

    base = jsonschema.Draft202012Validator
    plain_items = base.VALIDATORS["items"]
    plain_all_of = base.VALIDATORS["allOf"]

    def items(validator, subschema, instance, parent):
        if isinstance(instance, list) and subschema == {"type": "number"}:
            for k, value in enumerate(instance):
                if type(value) is not float and type(value) is not int:  # bool is not a number here
                    yield from validator.descend(value, subschema, path=k)
            return
        yield from plain_items(validator, subschema, instance, parent)

    def by_kind(all_of):
        """``{kind: (index, branch)}`` when every branch is ``if kind == const then ...``."""
        out = {}
        for index, branch in enumerate(all_of):
            if not isinstance(branch, dict) or set(branch) != {"if", "then"}:
                return None
            cond = branch["if"]
            const = cond.get("properties", {}).get("kind", {}).get("const") if isinstance(cond, dict) else None
            if not isinstance(const, str) or cond != {"properties": {"kind": {"const": const}}}:
                return None
            out[const] = (index, branch)
        return out

    dispatch: dict[int, dict | None] = {}

    def all_of(validator, subschemas, instance, schema):
        key = id(subschemas)
        if key not in dispatch:
            dispatch[key] = by_kind(subschemas)
        table = dispatch[key]
        if table is None or not isinstance(instance, dict) or not isinstance(instance.get("kind"), str):
            # a block without a text kind: every branch's ``if`` holds vacuously
            yield from plain_all_of(validator, subschemas, instance, schema)
            return
        hit = table.get(instance["kind"])
        if hit is not None:
            index, branch = hit
            yield from validator.descend(instance, branch, schema_path=index)

    def properties(validator, props, instance, schema):
        if not validator.is_type(instance, "object"):
            return
        for prop, sub in props.items():
            if prop not in instance:
                continue
            value = instance[prop]
            key = None
            if isinstance(value, (dict, list)) and value:
                frozen = _frozen(value)
                if frozen is not None:
                    key = (id(sub), frozen)
                    if key in _VALID_SEEN:
                        continue
            errors = list(validator.descend(value, sub, path=prop, schema_path=prop))
            if errors:
                yield from errors
            elif key is not None:
                if len(_VALID_SEEN) >= _VALID_SEEN_MAX:
                    _VALID_SEEN.clear()
                _VALID_SEEN.add(key)

    text = (resources.files("loopwright.resources") / "diagram.schema.json").read_text(encoding="utf-8")
    full = json.loads(text)
    extended = validators.extend(base, validators={"items": items, "allOf": all_of, "properties": properties})
    return extended(_inline_refs(full, full["$defs"])), full


def _inline_refs(node: Any, defs: dict[str, Any]) -> Any:
    """``node`` with every ``{"$ref": "#/$defs/x"}`` replaced by that definition (the schema has no cycles)."""
    if isinstance(node, list):
        return [_inline_refs(v, defs) for v in node]
    if not isinstance(node, dict):
        return node
    out = {k: _inline_refs(v, defs) for k, v in node.items() if k not in ("$ref", "$defs")}
    if "$ref" in node:
        out = {**_inline_refs(defs[node["$ref"].removeprefix("#/$defs/")], defs), **out}
    return out


def schema() -> dict[str, Any]:
    """The JSON Schema every project file is validated against (``resources/diagram.schema.json``)."""
    return _validator()[1]


# ---- a quick yes/no check of the schema, for the usual case of a valid file ---------
# Keywords that only annotate; any other keyword the quick check does not know makes it
# answer "not sure" (False), and the full validator then decides.
_ANNOTATIONS = frozenset(("$comment", "$schema", "$id", "$defs", "title", "description", "default", "examples"))


def _json_equal(a: Any, b: Any) -> bool:
    """Equality as JSON Schema means it for ``enum`` and ``const`` (``true`` is not ``1``)."""
    if isinstance(a, str) or isinstance(b, str):
        return a == b
    if isinstance(a, bool) or isinstance(b, bool):
        return type(a) is type(b) and a == b
    if isinstance(a, list) and isinstance(b, list):
        return len(a) == len(b) and all(_json_equal(x, y) for x, y in zip(a, b))
    if isinstance(a, dict) and isinstance(b, dict):
        return a.keys() == b.keys() and all(_json_equal(a[k], b[k]) for k in a)
    if isinstance(a, (list, dict)) or isinstance(b, (list, dict)):
        return False
    return a == b


def _is_number(v: Any) -> bool:
    return (type(v) is float or type(v) is int) or isinstance(v, (int, float)) and not isinstance(v, bool)


_TYPE_TESTS = {
    "object": lambda v: isinstance(v, dict),
    "array": lambda v: isinstance(v, list),
    "string": lambda v: isinstance(v, str),
    "number": _is_number,
    "integer": lambda v: _is_number(v) and (isinstance(v, int) or v.is_integer()),
    "boolean": lambda v: isinstance(v, bool),
    "null": lambda v: v is None,
}


def _never(value: Any) -> bool:
    return False


def _quick_check(node: Any):
    """A function ``value -> bool`` that says True only where the (``$ref``-free) schema
    ``node`` surely accepts ``value``.

    Written for the keywords our schema uses, with JSON Schema 2020-12's meaning (each
    keyword applies to its own type only); a keyword it does not know gives a function
    that always says False. A False sends the file to the full validator, which finds
    and words the error; so this check only ever needs to be right when it says True,
    and the file's reading stays that of the full validator.
    """
    if node is True or node == {}:
        return lambda v: True
    if not isinstance(node, dict) or "patternProperties" in node or "prefixItems" in node or "else" in node:
        return _never
    checks = []
    done: tuple[str, ...] = ()
    if node.get("type") == "object" and "properties" in node:
        # the usual object node: its type, properties and required keys in one pass
        required = node.get("required", [])
        if not isinstance(required, list):
            return _never
        checks.append(_quick_object(node["properties"], node.get("additionalProperties", True), strict=True, required=frozenset(required)))
        done = ("type", "properties", "required")
    for kw, val in node.items():
        if kw in _ANNOTATIONS or kw in ("then", "additionalProperties") or kw in done:
            continue
        if kw == "type":
            tests = [_TYPE_TESTS[t] for t in ([val] if isinstance(val, str) else val) if t in _TYPE_TESTS]
            if len(tests) != (1 if isinstance(val, str) else len(val)):
                return _never
            checks.append(tests[0] if len(tests) == 1 else lambda v, tests=tests: any(t(v) for t in tests))
        elif kw == "properties":
            checks.append(_quick_object(val, node.get("additionalProperties", True)))
        elif kw == "propertyNames":
            f = _quick_check(val)
            checks.append(lambda v, f=f: not isinstance(v, dict) or all(f(k) for k in v))
        elif kw == "required":
            checks.append(lambda v, req=frozenset(val): not isinstance(v, dict) or req.issubset(v))
        elif kw == "items":
            if not isinstance(val, dict):
                return _never
            checks.append(_quick_list(val))
        elif kw in ("minItems", "maxItems"):
            lo, hi = (val, math.inf) if kw == "minItems" else (0, val)
            checks.append(lambda v, lo=lo, hi=hi: not isinstance(v, list) or lo <= len(v) <= hi)
        elif kw == "minLength":
            checks.append(lambda v, lo=val: not isinstance(v, str) or len(v) >= lo)
        elif kw == "pattern":
            rx = re.compile(val)
            checks.append(lambda v, rx=rx: not isinstance(v, str) or rx.search(v) is not None)
        elif kw in ("minimum", "maximum", "exclusiveMinimum", "exclusiveMaximum"):
            cmp = {"minimum": lambda x, b: x >= b, "maximum": lambda x, b: x <= b,
                   "exclusiveMinimum": lambda x, b: x > b, "exclusiveMaximum": lambda x, b: x < b}[kw]
            checks.append(lambda v, cmp=cmp, b=val: not _is_number(v) or cmp(v, b))
        elif kw in ("enum", "const"):
            checks.append(_quick_choice(val if kw == "enum" else [val]))
        elif kw == "allOf":
            checks.append(_quick_by_kind(val) or _quick_all([_quick_check(sub) for sub in val]))
        elif kw == "anyOf":
            checks.append(_quick_any([_quick_check(sub) for sub in val]))
        elif kw == "if":
            # "if" decides whether "then" applies, so it must be exact both ways: a False
            # meaning "not sure" would skip a "then" that applies
            if not _exact_condition(val):
                return _never
            cond, then = _quick_check(val), _quick_check(node.get("then", True))
            checks.append(lambda v, cond=cond, then=then: not cond(v) or then(v))
        else:
            return _never
    if "additionalProperties" in node and "properties" not in node:
        checks.append(_quick_object({}, node["additionalProperties"]))
    return _quick_all(checks)


def _quick_choice(choices: list):
    """``enum`` (or ``const``: one choice), by a set lookup when the choices are all text or
    all numbers (``true`` is not ``1`` here, as in JSON Schema)."""
    if all(type(c) is str for c in choices):
        texts = frozenset(choices)
        return lambda v: type(v) is str and v in texts
    if all(type(c) in (int, float) for c in choices):
        numbers = frozenset(choices)
        return lambda v: (type(v) is int or type(v) is float) and v in numbers
    return lambda v: any(_json_equal(v, c) for c in choices)


def _quick_all(checks):
    """All of ``checks`` (called in turn, as few Python frames as possible: this runs on every value of a file)."""
    if len(checks) == 1:
        return checks[0]
    if len(checks) == 2:
        first, second = checks
        return lambda v: first(v) and second(v)
    if len(checks) == 3:
        first, second, third = checks
        return lambda v: first(v) and second(v) and third(v)

    def every(v):
        for c in checks:
            if not c(v):
                return False
        return True

    return every


def _quick_any(checks):
    """Any of ``checks``, the first that says True deciding (``anyOf``)."""
    def some(v):
        for c in checks:
            if c(v):
                return True
        return False

    return some


def _quick_object(props: dict, additional: Any, *, strict: bool = False, required: frozenset = frozenset()):
    """``properties`` together with ``additionalProperties`` (one pass over the object's keys);
    ``strict``: also ``"type": "object"`` (anything else fails), with the ``required`` keys."""
    known = {k: _quick_check(sub) for k, sub in props.items()}
    other = None if additional is False else _quick_check(additional)

    def check(v):
        if not isinstance(v, dict):
            return not strict
        for k, x in v.items():
            f = known.get(k, other)
            if f is None or not f(x):
                return False
        return required.issubset(v)

    return check


def _quick_list(items: dict):
    if items == {"type": "number"}:  # the matrices' rows: most of a file's values
        def numbers(v):
            if not isinstance(v, list):
                return True
            for x in v:
                if type(x) is not float and type(x) is not int:
                    return False
            return True

        return numbers
    f = _quick_check(items)

    def each(v):
        if not isinstance(v, list):
            return True
        for x in v:
            if not f(x):
                return False
        return True

    return each


def _quick_by_kind(all_of: list):
    """An ``allOf`` of ``if {kind: const X} then ...`` branches, as a lookup of the one branch
    that can apply (a value whose ``kind`` is not text goes branch by branch)."""
    table = {}
    for branch in all_of:
        if not isinstance(branch, dict) or set(branch) != {"if", "then"} or not _exact_condition(branch["if"]):
            return None
        cond = branch["if"]["properties"]
        if set(cond) != {"kind"} or not isinstance(cond["kind"]["const"], str) or cond["kind"]["const"] in table:
            return None
        table[cond["kind"]["const"]] = _quick_check(branch["then"])

    def by_kind(v):
        if not isinstance(v, dict) or not isinstance(v.get("kind"), str):
            return False  # not sure: the full validator decides
        f = table.get(v["kind"])
        return f is None or f(v)

    return by_kind


def _exact_condition(node: Any) -> bool:
    """Whether :func:`_quick_check` of ``node`` is exact both ways (True and False mean what
    they say): only the ``{"properties": {key: {"const": text}}}`` form our schema uses."""
    if not isinstance(node, dict) or set(node) != {"properties"}:
        return False
    return all(isinstance(sub, dict) and set(sub) == {"const"} for sub in node["properties"].values())


@functools.cache
def _quick_validator():
    return _quick_check(_validator()[0].schema)


_TYPE_NAMES = {"object": "an object", "array": "a list", "string": "text", "number": "a number", "integer": "a whole number",
               "boolean": "true or false", "null": "null"}


def _schema_message(err) -> tuple[tuple, str]:
    """``(path, what is wrong)`` for one jsonschema error, in words an engineer reads."""
    path, kw, val, inst = tuple(err.absolute_path), err.validator, err.validator_value, err.instance
    title = err.schema.get("title") if isinstance(err.schema, dict) else None
    if kw == "required":
        missing = [k for k in val if k not in inst]
        return path, f"missing field {_show(missing[0])}"
    if kw == "additionalProperties":
        known = list(err.schema.get("properties", {}))
        extra = sorted(set(inst) - set(known))
        return path, f"unknown field {_show(extra[0])}" + (f" (known: {', '.join(known)})" if known else "")
    if kw == "propertyNames":
        return path, f"{err.message.splitlines()[0]}"
    if kw in ("enum", "const"):
        choices = val if kw == "enum" else [val]
        return path, f"{_show(inst)} is not one of {', '.join(c if isinstance(c, str) else _show(c) for c in choices)}"
    if kw == "pattern":
        return path, f"{_show(inst)} is not {title or 'in the expected form'}"
    if kw in ("minimum", "maximum", "exclusiveMinimum", "exclusiveMaximum"):
        words = {"minimum": "less than", "maximum": "more than", "exclusiveMinimum": "not more than",
                 "exclusiveMaximum": "not less than"}[kw]
        return path, f"{_show(inst)} is {words} {_show(val)}; expected {title or _TYPE_NAMES.get(err.schema.get('type'), 'a number')}"
    if kw in ("minItems", "maxItems"):
        count = f"{len(inst)} entr{'y' if len(inst) == 1 else 'ies'}"
        return path, f"has {count}, expected {'at least' if kw == 'minItems' else 'at most'} {val}" + (f" ({title})" if title else "")
    if kw == "type" or kw in ("anyOf", "oneOf"):
        expected = title or (" or ".join(_TYPE_NAMES.get(t, t) for t in ([val] if isinstance(val, str) else val)) if kw == "type" else "another form")
        return path, f"expected {expected}, got {_show(inst)}"
    return path, err.message.splitlines()[0][:120]


def _refuse_schema_errors(data: dict, origin: str) -> None:
    if _quick_validator()(data):  # surely valid: the full validator would find nothing
        return
    errors = list(_validator()[0].iter_errors(data))
    if errors:
        err = _most_telling(min(errors, key=lambda e: _document_order(data, e.absolute_path)))
        path, what = _schema_message(err)
        raise ProjectFileError(f"{origin}: {_json_path(path)}{_owner(data, path)}: {what}")


def _document_order(data: Any, path: Sequence[Any]) -> tuple:
    """Sort key: where ``path`` stands in the file (the first fault is the one reported)."""
    key, node = [], data
    for part in path:
        if isinstance(node, dict):
            key.append(list(node).index(part) if part in node else len(node))
        else:
            key.append(part if isinstance(part, int) else 0)
        try:
            node = node[part]
        except (LookupError, TypeError):
            break
    return tuple(key)


def _most_telling(err):
    """Inside ``anyOf`` (a matrix: number, list or rows): follow the form the value came closest to.

    That is the alternative with the fewest errors below the value itself (the deepest on
    a tie); when every alternative fails at the value itself (``null`` for a matrix), the
    ``anyOf`` stands and its title says what was expected.
    """
    while err.validator in ("anyOf", "oneOf") and err.context:
        branches: dict[Any, list] = {}
        for sub in err.context:
            branches.setdefault(sub.relative_schema_path[0], []).append(sub)
        inside = [subs for subs in branches.values() if all(len(e.relative_path) for e in subs)]
        if not inside:
            break
        chosen = min(inside, key=lambda subs: (len(subs), -max(len(e.relative_path) for e in subs)))
        err = min(chosen, key=lambda e: tuple(e.relative_path))
    return err


def from_dict(data: Any, *, origin: str = "project file") -> Diagram:
    """Build a :class:`Diagram` from the JSON-native form.

    The data are validated against :func:`schema` first, then the rules a schema cannot
    state: finite numbers, bounded nesting and total width, unique names, wires between
    existing ports.

    Raises
    ------
    FormatVersionError
        Written by a newer Loopwright.
    ProjectFileError
        Not our format, or a malformed field: one line naming the JSON path
        (``blocks[3].params.waveform.intensity``) and the block or wire it belongs to.
    """
    return _build(data, origin, scan=True)


def _build(data: Any, origin: str, *, scan: bool, own: bool = False) -> Diagram:
    """:func:`from_dict`; ``scan``: look for non-finite numbers and deep nesting (the parser may have done it);
    ``own``: ``data`` was parsed here and nobody else holds it, so the blocks may keep its values."""
    if not isinstance(data, dict):
        raise ProjectFileError(f"{origin}: not a Loopwright diagram (the top level must be a JSON object)")
    if data.get("format") != FORMAT_NAME:
        raise ProjectFileError(f"{origin}: not a Loopwright diagram (format is {_show(data.get('format'))}, expected {FORMAT_NAME!r})")
    version = data.get("version")
    if not (isinstance(version, int) and not isinstance(version, bool) or isinstance(version, float) and version.is_integer()) or version < 1:
        raise ProjectFileError(f"{origin}: version {_show(version)} is not a positive whole number")
    if version > FORMAT_VERSION:
        raise FormatVersionError(
            f"{origin}: written by a newer Loopwright (file format {int(version)}, this version reads up to {FORMAT_VERSION}); "
            "update Loopwright to open it"
        )
    if scan:
        _refuse_odd_values(data, origin)
    _refuse_schema_errors(data, origin)
    d = Diagram()
    d.meta = data.get("meta", {})
    d.settings = data.get("settings", {})
    # every block at once; one by one (with the error of the first refused) only when that fails
    entries = [(entry["kind"], entry["name"], entry["params"] if own else copy.deepcopy(entry["params"]),
                entry.get("layout", {}), entry.get("caption", "")) for entry in data["blocks"]]
    if not d.add_blocks_at_once(entries):
        for k, (kind, name, params, layout, caption) in enumerate(entries):
            try:
                bid = d.add_block(kind, name, params, layout=layout, caption=caption, take_params=True)
            except EngineError as err:
                raise ProjectFileError(f"{origin}: {_json_path(('blocks', k))}{_owner(data, ('blocks', k))}: {err.message}") from err
            # keep the layout exactly as written, so load-then-save gives the same file
            d.blocks[bid].layout = layout
    # Before anything of that size exists: a width typed with a zero too many would cost
    # minutes and gigabytes before a width mismatch is reported.
    total, largest = declared_width(d.blocks.values())
    if total > MAX_TOTAL_WIDTH:
        path = ("blocks", list(d.blocks).index(largest.id), "params", "width")
        raise ProjectFileError(
            f"{origin}: the widths add up to {total} signal components, at most {MAX_TOTAL_WIDTH} "
            f"(largest: {_json_path(path)}{_owner(data, path)}); is a width mistyped?"
        )
    if d.connect_at_once([(entry["signal"], entry["from"], entry["to"], entry.get("layout")) for entry in data["wires"]]):
        return d
    for k, entry in enumerate(data["wires"]):
        signal, src = entry["signal"], entry["from"]
        wid = None
        for j, target in enumerate(entry["to"]):
            try:
                wid = d.connect(src, target, name=signal)
            except EngineError as err:
                path = ("wires", k, "to", j)
                raise ProjectFileError(f"{origin}: {_json_path(path)}{_owner(data, path)}: {err.message}") from err
        if d.wires[wid].name != signal:
            raise ProjectFileError(
                f"{origin}: {_json_path(('wires', k))}{_owner(data, ('wires', k))}: a second wire leaves {src} "
                f"(wire {d.wires[wid].name!r} does already); one output port carries one wire (list every target in 'to')"
            )
        if "layout" in entry:
            d.wires[wid].layout = entry["layout"]
    return d


def loads(text: str, *, origin: str = "project file") -> Diagram:
    """Parse project-file text; see :func:`from_dict` for the errors."""
    data, odd = _parse(text, origin)
    return _build(data, origin, scan=odd, own=True)


def load(path: str | os.PathLike) -> Diagram:
    """Read a project file.

    Raises
    ------
    ProjectFileError
        Missing, unreadable, not JSON, not ours, malformed (see :func:`from_dict`).
    """
    p = Path(path)
    shown = _printable(str(p))
    try:
        text = p.read_text(encoding="utf-8")
    except FileNotFoundError as err:
        raise ProjectFileError(f"{shown}: no such file") from err
    except IsADirectoryError as err:
        raise ProjectFileError(f"{shown}: is a folder, not a diagram file") from err
    except (OSError, UnicodeDecodeError) as err:
        raise ProjectFileError(f"{shown}: cannot be read ({err.__class__.__name__}: {_printable(str(err))})") from err
    return loads(text, origin=shown)


def _printable(text: str) -> str:
    """``text`` with control characters escaped, so a message stays on one line."""
    return text if text.isprintable() else "".join(c if c.isprintable() else repr(c)[1:-1] for c in text)


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
