"""A small declarative schema engine for the TOML config.

Each config section is a frozen dataclass whose fields carry a :class:`Key`
in their metadata: the parser of the value, its unit, its default and its
documentation. :func:`build` walks a TOML table against such a dataclass,
refuses unknown keys (listing the valid ones), parses every value and names
the dotted key path in every error. The same metadata renders the key
reference of ``configs/README.md`` (:func:`markdown_reference`), so the
documentation cannot drift from the code.
"""

from __future__ import annotations

import dataclasses
import re
from dataclasses import MISSING
from pathlib import Path
from typing import Any, Callable

from ..errors import ConfigError
from ..units import parse_quantity

__all__ = ["Key", "key", "build", "Context", "markdown_reference"]


@dataclasses.dataclass
class Context:
    """What parsers need besides the value: the config file (for messages, paths)."""

    source: str | None = None
    base: Path = Path(".")


@dataclasses.dataclass(frozen=True)
class Key:
    parse: Callable[[Any, str, Context], Any]
    doc: str
    unit: str = ""
    type_name: str = ""
    required: bool = False


def key(parse, doc, *, default=MISSING, unit="", type_name="", required=False, factory=MISSING):
    """A dataclass field described for the config schema."""
    meta = {"key": Key(parse, doc, unit, type_name, required)}
    if factory is not MISSING:
        return dataclasses.field(default_factory=factory, metadata=meta)
    # required keys still get a default (None) so field order is free; build() enforces them
    return dataclasses.field(default=None if default is MISSING else default, metadata=meta)


def _err(k, msg, ctx):
    return ConfigError(k, msg, source=ctx.source)


# --------------------------------------------------------------------------- parsers
def quantity(unit, *, positive=False, nonnegative=False, low=None, high=None):
    def parse(value, k, ctx):
        v = parse_quantity(value, unit, key=k, source=ctx.source)
        if positive and not v > 0:
            raise _err(k, f"expected a positive value in {unit or 'no unit'}, got {value!r}", ctx)
        if nonnegative and v < 0:
            raise _err(k, f"expected a value >= 0 in {unit or 'no unit'}, got {value!r}", ctx)
        if low is not None and v < low or high is not None and v > high:
            raise _err(k, f"expected a value between {low} and {high} {unit}, got {value!r}", ctx)
        return v
    parse.type_name = f"quantity [{unit or '1'}]"
    return parse


def string(*, pattern=None, hint=""):
    def parse(value, k, ctx):
        if not isinstance(value, str):
            raise _err(k, f"expected a string, got {value!r}", ctx)
        if pattern and not re.fullmatch(pattern, value):
            raise _err(k, f"{value!r} is not allowed: {hint}", ctx)
        return value
    parse.type_name = "string"
    return parse


def choice(*options):
    def parse(value, k, ctx):
        if value not in options:
            raise _err(k, f"expected one of {', '.join(map(repr, options))}, got {value!r}", ctx)
        return value
    parse.type_name = " | ".join(f'"{o}"' for o in options)
    return parse


def boolean(value, k, ctx):
    if not isinstance(value, bool):
        raise _err(k, f"expected true or false, got {value!r}", ctx)
    return value


boolean.type_name = "bool"


def integer(*, low=None, high=None):
    def parse(value, k, ctx):
        if isinstance(value, bool) or not isinstance(value, int):
            raise _err(k, f"expected a whole number, got {value!r}", ctx)
        if low is not None and value < low or high is not None and value > high:
            raise _err(k, f"expected a whole number from {low} to {high}, got {value!r}", ctx)
        return value
    parse.type_name = "integer"
    return parse


def path(value, k, ctx):
    """A file path, relative paths resolved from the config file's folder."""
    if not isinstance(value, str) or not value.strip():
        raise _err(k, f"expected a file path as a string, got {value!r}", ctx)
    if "\x00" in value:
        raise _err(k, "a path cannot contain a NUL character", ctx)
    try:
        p = Path(value).expanduser()
    except RuntimeError:       # "~name" of no such user, or "~" without a home folder
        user = value.split("/", 1)[0].split("\\", 1)[0]
        raise _err(k, f"{value!r} starts with {user!r}, a home folder this system does not know; "
                      "write the path in full", ctx) from None
    return p if p.is_absolute() else (ctx.base / p)


path.type_name = "path"


def list_of(item, *, min_len=0, max_len=None):
    def parse(value, k, ctx):
        if not isinstance(value, list):
            raise _err(k, f"expected a list, got {value!r}", ctx)
        if len(value) < min_len or max_len is not None and len(value) > max_len:
            n = f"{min_len}" if max_len == min_len else f"{min_len} to {max_len or 'any'}"
            raise _err(k, f"expected a list of {n} entries, got {len(value)}", ctx)
        return tuple(item(v, f"{k}[{i}]", ctx) for i, v in enumerate(value))
    parse.type_name = f"list of {getattr(item, 'type_name', 'values')}"
    if getattr(item, "schema", None) is not None:     # a list of tables: documented once, per entry
        parse.schema, parse.each = item.schema, True
    return parse


def point(value, k, ctx):
    if (not isinstance(value, list) or len(value) != 2
            or not all(isinstance(c, (int, float)) and not isinstance(c, bool) for c in value)):
        raise _err(k, f"expected a point [x, y] of two numbers, got {value!r}", ctx)
    return (float(value[0]), float(value[1]))


point.type_name = "[x, y]"


def either(*parsers):
    """First parser that accepts the value wins; the last one's error is raised."""
    def parse(value, k, ctx):
        err = None
        for p in parsers:
            try:
                return p(value, k, ctx)
            except ConfigError as e:
                err = e
        raise err
    parse.type_name = " or ".join(getattr(p, "type_name", "?") for p in parsers)
    return parse


def table_of(cls):
    def parse(value, k, ctx):
        return build(cls, value, k, ctx)
    parse.type_name = "table"
    parse.schema = cls
    return parse


def mapping_of_strings(value, k, ctx):
    if not isinstance(value, dict) or not all(isinstance(a, str) and isinstance(b, str) for a, b in value.items()):
        raise _err(k, f"expected a table of name = \"column\" strings, got {value!r}", ctx)
    return dict(value)


mapping_of_strings.type_name = "table of strings"


# --------------------------------------------------------------------------- engine
def build(cls, table, prefix: str, ctx: Context):
    """Build dataclass ``cls`` from TOML ``table``; every error names ``prefix.key``."""
    if not isinstance(table, dict):
        raise _err(prefix, f"expected a table, got {table!r}", ctx)
    fields = {f.name: f for f in dataclasses.fields(cls) if "key" in f.metadata}
    unknown = sorted(set(table) - set(fields))
    if unknown:
        name = unknown[0]
        raise _err(f"{prefix}.{name}" if prefix else name,
                   f"unknown key; valid keys here: {', '.join(sorted(fields))}", ctx)
    values = {}
    for name, f in fields.items():
        k = f"{prefix}.{name}" if prefix else name
        spec: Key = f.metadata["key"]
        if name in table:
            values[name] = spec.parse(table[name], k, ctx)
        elif spec.required:
            raise _err(k, f"is required ({spec.doc.split('.')[0].lower()})", ctx)
    obj = cls(**values)
    check = getattr(obj, "_check", None)
    if check is not None:
        check(prefix, ctx)
    return obj


def _cell(text) -> str:
    """A Markdown table cell: a bare ``|`` would end the cell, so it is escaped."""
    return str(text).replace("|", "\\|")


def _key_table(cls) -> list[str]:
    """The Markdown rows of the keys of one table."""
    out = ["| key | type | unit | default | meaning |", "|---|---|---|---|---|"]
    for f in (f for f in dataclasses.fields(cls) if "key" in f.metadata):
        spec: Key = f.metadata["key"]
        tname = spec.type_name or getattr(spec.parse, "type_name", "")
        if spec.required:
            default = "**required**"
        elif f.default is not MISSING:
            default = "—" if f.default is None else f"`{_show(f.default)}`"
        elif f.default_factory is not MISSING:  # type: ignore[misc]
            default = "empty"
        else:
            default = "—"
        out.append(f"| `{f.name}` | {_cell(tname)} | {_cell(spec.unit or '')} | {_cell(default)} | "
                   f"{_cell(spec.doc)} |")
    return out


def _nested(cls):
    """(field name, table class, one table per list entry) of the tables nested in ``cls``."""
    for f in dataclasses.fields(cls):
        parse = f.metadata["key"].parse if "key" in f.metadata else None
        sub = getattr(parse, "schema", None)
        if sub is not None:
            yield f.name, sub, bool(getattr(parse, "each", False))


def markdown_reference(roots, *, shallow=()) -> str:
    """Render the keys of the config tables as Markdown, every table once.

    Parameters
    ----------
    roots : sequence of (cls, places, title)
        Tables in reading order; ``places`` the dotted key paths where the table sits (the
        first is used for its nested tables), ``title`` the heading (default: the places).
    shallow : sequence of classes
        Tables whose nested tables are not listed after them (the top level, whose tables
        are roots of their own).

    Returns
    -------
    str
        One heading and one table per table class; a table used at several places (the
        surface layers, the registration of the top level and of a run) appears once, with
        every place in its heading, right after its first parent.
    """
    places: dict = {}
    order: list = []
    roots = [(cls, [ps] if isinstance(ps, str) else list(ps), title) for cls, ps, title in roots]
    root_classes = {cls for cls, _ps, _t in roots}

    def collect(cls, where, title):
        if cls not in places:
            places[cls] = {"places": [], "title": title}
        if cls not in seen:
            seen.add(cls)
            order.append(cls)
        for p in where:
            if p not in places[cls]["places"]:
                places[cls]["places"].append(p)
        if cls in shallow:
            return
        for name, sub, each in _nested(cls):
            place = f"{where[0]}.{name}" + ("[i]" if each else "")
            if sub in root_classes and sub is not cls:
                places.setdefault(sub, {"places": [], "title": None})
                if place not in places[sub]["places"]:
                    places[sub]["places"].append(place)
                continue
            collect(sub, [place], None)

    seen: set = set()
    for cls, where, title in roots:
        if cls in places and cls not in seen:
            # met nested in an earlier root: its own place comes first, where it is rendered
            places[cls] = {"places": where + places[cls]["places"], "title": title}
        collect(cls, where, title)
    out = []
    for cls in order:
        entry = places[cls]
        title = entry["title"] or ", ".join(f"`{p}`" for p in entry["places"])
        out.append(f"### {title}\n")
        doc = (cls.__doc__ or "").strip().split("\n\n")[0].replace("\n", " ")
        if doc:
            out.append(doc + "\n")
        out += _key_table(cls)
        out.append("")
    return "\n".join(out)


def _show(v):
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, tuple):
        return "[" + ", ".join(_show(x) for x in v) + "]"
    if isinstance(v, str):
        return f'"{v}"'
    return repr(v)
