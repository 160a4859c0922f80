"""Reading YAML as the config format means it: the YAML 1.2 core schema, located, bounded.

libyaml (through PyYAML) parses; this module decides what each scalar is.
PyYAML resolves plain scalars by YAML 1.1 rules, under which `NO` is false,
`0123` is 83, `12:30` is 750 and `1_000` is 1000. Here plain scalars follow
the YAML 1.2 core schema (YAML 1.2.2 spec, section 10.3.2): only
true/false (any of three casings) are booleans, null/~/empty is null,
integers are decimal, 0o octal or 0x hex, floats include .inf and .nan.

Which Python value a scalar becomes also depends on the field it fills,
given as a `Shape` derived from the pydantic models:
- a text field keeps the characters written (`[7.10]` stays "7.10", an
  override key `0123` stays "0123"); mapping keys are always text;
- a number field, or a free value such as a parameter, gets the core
  schema's value, and is refused when YAML 1.1 would read the same
  characters differently (`yes`, `062`, `1_000`, `12:30`), so that a config
  never means one thing here and another to a YAML 1.1 reader.
Tags other than the core ones (`!!binary`, `!!timestamp`, local tags) are
refused; so are aliases that contain themselves, nesting deeper than
`MAX_DEPTH`, numbers beyond 64 bits or beyond a float's range, and inputs
that are not regular files or over `MAX_FILE_BYTES`.
"""

from __future__ import annotations

import math
import os
import re
import stat
import types
from datetime import date
from pathlib import Path
from typing import IO, Annotated, Any, Literal, Union, get_args, get_origin

import yaml
from pydantic import BaseModel

from ._config import Document, PathKey
from ._errors import ConfigError, Problem, shown

MAX_FILE_BYTES = 5 * 1024 * 1024
MAX_NODES = 200_000
MAX_ALIASES = 1_000
MAX_DEPTH = 64
MAX_INTEGER = 2**63 - 1

_TAG = "tag:yaml.org,2002:"
_STR, _INT, _FLOAT, _BOOL, _NULL = (_TAG + kind for kind in ("str", "int", "float", "bool", "null"))
_MAP, _SEQ, _MERGE = _TAG + "map", _TAG + "seq", _TAG + "merge"
_PLAIN = "tag:sortition,2026:plain"  # a plain scalar, resolved here rather than by PyYAML

# YAML 1.2.2 spec, section 10.3.2 (core schema tag resolution).
_CORE_NULL = frozenset(("null", "Null", "NULL", "~", ""))
_CORE_BOOL = {"true": True, "True": True, "TRUE": True, "false": False, "False": False, "FALSE": False}
_CORE_INT = re.compile(r"[-+]?[0-9]+\Z")
_CORE_OCTAL = re.compile(r"0o[0-7]+\Z")
_CORE_HEX = re.compile(r"0x[0-9a-fA-F]+\Z")
_CORE_FLOAT = re.compile(r"[-+]?(?:\.[0-9]+|[0-9]+(?:\.[0-9]*)?)(?:[eE][-+]?[0-9]+)?\Z")
_CORE_INF = re.compile(r"[-+]?\.(?:inf|Inf|INF)\Z")
_CORE_NAN = re.compile(r"\.(?:nan|NaN|NAN)\Z")
_LEADING_ZERO = re.compile(r"[-+]?0[0-9]")  # octal to YAML 1.1 and to many readers, decimal to YAML 1.2
_MAX_INTEGER_DIGITS = 70  # more than any 64-bit integer needs in base 8, 10 or 16, even with leading zeros

# What a field expects: text, a number, anything (parameters), or a container of shapes.
TEXT, NUMBER, ANY = "text", "number", "any"
Shape = Any  # TEXT | NUMBER | ANY | ("model", {key: Shape}) | ("list", Shape) | ("dict", Shape) | ("either", container, scalar)


class _CoreLoader(getattr(yaml, "CSafeLoader", yaml.SafeLoader)):  # type: ignore[misc]
    """libyaml's parser and composer (when present); plain scalars are left for `_scalar` to resolve."""

    def resolve(self, kind: type, value: str, implicit: tuple[bool, bool]) -> str:
        if kind is yaml.ScalarNode:
            if implicit[0]:
                return _MERGE if value == "<<" else _PLAIN
            return _STR
        return _SEQ if kind is yaml.SequenceNode else _MAP


_YAML11 = yaml.resolver.Resolver()
_YAML11_CONSTRUCTOR = yaml.constructor.SafeConstructor()
_YAML11_BUILDERS = {
    _BOOL: _YAML11_CONSTRUCTOR.construct_yaml_bool,
    _INT: _YAML11_CONSTRUCTOR.construct_yaml_int,
    _FLOAT: _YAML11_CONSTRUCTOR.construct_yaml_float,
    _NULL: _YAML11_CONSTRUCTOR.construct_yaml_null,
}


def shape_of(annotation: Any) -> Shape:
    """What kind of YAML value a pydantic field annotation expects."""
    origin = get_origin(annotation)
    if origin is Annotated:
        return shape_of(get_args(annotation)[0])
    if isinstance(annotation, type) and issubclass(annotation, BaseModel):
        return ("model", {name: shape_of(info.annotation) for name, info in annotation.model_fields.items()})
    if origin is list:
        return ("list", shape_of(get_args(annotation)[0]))
    if origin is dict:
        return ("dict", shape_of(get_args(annotation)[1]))
    if origin is Literal:
        return TEXT if all(isinstance(a, str) for a in get_args(annotation)) else NUMBER
    if origin in (Union, types.UnionType):
        shapes = [shape_of(a) for a in get_args(annotation) if a is not type(None)]
        containers = [s for s in shapes if isinstance(s, tuple)]
        scalar = TEXT if TEXT in shapes else NUMBER if NUMBER in shapes else None
        if not containers and scalar:
            return scalar
        if len(containers) == 1 and scalar:
            return ("either", containers[0], scalar)
        return containers[0] if len(shapes) == 1 else ANY
    if annotation in (str, date):
        return TEXT
    if annotation in (int, float, bool):
        return NUMBER
    return ANY


def _scalar_shape(shape: Shape) -> Shape:
    if isinstance(shape, tuple):
        return shape[2] if shape[0] == "either" else ANY
    return shape


def _child_shape(shape: Shape, key: str | int) -> Shape:
    """The shape of a mapping's value under `key` (text) or a sequence's item (`key` its index)."""
    if isinstance(shape, tuple) and shape[0] == "either":
        shape = shape[1]
    if not isinstance(shape, tuple):
        return ANY
    kind, inner = shape
    if isinstance(key, int):
        return inner if kind == "list" else ANY
    if kind == "model":
        return inner.get(key, ANY)
    return inner if kind == "dict" else ANY


def field_names(shape: Shape, loc: PathKey) -> list[str]:
    """The keys a model accepts at `loc` (keys and indexes from the file's root), or [] where keys are free."""
    for key in loc:
        shape = _child_shape(shape, key)
    if isinstance(shape, tuple) and shape[0] == "either":
        shape = shape[1]
    return list(shape[1]) if isinstance(shape, tuple) and shape[0] == "model" else []


def _core_value(text: str) -> tuple[str, Any]:
    """(tag, value) of a plain scalar under the YAML 1.2 core schema; ValueError when it is out of range."""
    if text in _CORE_NULL:
        return _NULL, None
    if text in _CORE_BOOL:
        return _BOOL, _CORE_BOOL[text]
    if _CORE_INT.match(text):
        return _INT, _checked_integer(text, 10)
    if _CORE_OCTAL.match(text):
        return _INT, _checked_integer(text[2:], 8)
    if _CORE_HEX.match(text):
        return _INT, _checked_integer(text[2:], 16)
    if _CORE_FLOAT.match(text):
        value = float(text)
        if math.isinf(value):
            raise ValueError(f"{text} is beyond the range of a float")
        return _FLOAT, value
    if _CORE_INF.match(text):
        return _FLOAT, -math.inf if text.startswith("-") else math.inf
    if _CORE_NAN.match(text):
        return _FLOAT, math.nan
    return _STR, text


def _checked_integer(digits: str, base: int) -> int:
    # Long digit strings are refused before conversion, which is quadratic and capped by Python.
    value = int(digits, base) if len(digits) <= _MAX_INTEGER_DIGITS else MAX_INTEGER + 1
    if abs(value) > MAX_INTEGER:
        raise ValueError(f"{shown(digits)} is beyond a 64-bit integer")
    return value


def _yaml11_reading(text: str) -> tuple[str, Any]:
    """(tag, value) that a YAML 1.1 reader gives the same plain scalar: PyYAML's reading, plus the
    one-letter booleans of the YAML 1.1 type repository (yaml.org/type/bool.html) that PyYAML leaves out."""
    if text in ("y", "Y", "n", "N"):
        return _BOOL, text in ("y", "Y")
    tag = _YAML11.resolve(yaml.ScalarNode, text, (True, False))
    builder = _YAML11_BUILDERS.get(tag)
    if builder is not None and len(text) > _MAX_INTEGER_DIGITS:
        return tag, None  # a number too long to matter here; only its kind is compared
    if builder is None:
        return _STR, text  # 1.1 timestamps read as text here, the way a date field wants them
    try:
        return tag, builder(yaml.ScalarNode(tag, text))
    except (ValueError, OverflowError):
        return tag, None


def _ambiguity(text: str, tag: str, value: Any) -> str | None:
    """Why YAML 1.1 and 1.2 disagree on a plain scalar, or None when they agree."""
    old_tag, old_value = _yaml11_reading(text)
    same = old_tag == tag and (old_value == value or (isinstance(value, float) and math.isnan(value)))
    if tag == _INT and _LEADING_ZERO.match(text):
        same = False
    if same:
        return None
    if old_tag == _INT and tag == _INT:
        return (f"{shown(text)} has a leading zero, which YAML 1.1 reads as octal ({old_value!r}); "
                f"write {value!r}, or quote it if it is text")
    now = "text" if tag == _STR else shown(value)
    before = "text" if old_tag == _STR else "a number" if old_value is None else shown(old_value)
    return (f"{shown(text)} means {now} under YAML 1.2, which configs follow, but {before} under YAML 1.1; "
            "quote it if it is text, or write it so that both agree: true/false, 1000 not 1_000, "
            "0.001 or 1.0e-3 not 1e-3")


def to_plain(doc: Document, node: yaml.Node, shape: Shape) -> Any:
    """Turn a composed node into plain values for `shape`, recording the mark of every path in `doc`.

    Values refused as ambiguous are kept (as YAML 1.2 reads them) and listed
    in `doc.findings`, so that the rest of the file is still read and checked.
    """
    seen: set[int] = set()
    active: set[int] = set()  # nodes on the way from the root to here: an alias back to one is a cycle
    counts = {"nodes": 0, "aliases": 0}

    def fail(rule: str, path: PathKey, message: str) -> ConfigError:
        return ConfigError([doc.problem(rule, path, message)])

    def mark(path: PathKey, node: yaml.Node, first: bool) -> None:
        here = (node.start_mark.line + 1, node.start_mark.column + 1)
        if first:
            doc.marks.setdefault(path, here)
        else:
            doc.marks[path] = here

    def convert(node: yaml.Node, path: PathKey, shape: Shape) -> Any:
        counts["nodes"] += 1
        if id(node) in seen:
            counts["aliases"] += 1
        seen.add(id(node))
        if counts["nodes"] > MAX_NODES or counts["aliases"] > MAX_ALIASES:
            raise fail("yaml-limits", path, f"document too large after expanding aliases (more than {MAX_NODES} "
                       f"nodes or {MAX_ALIASES} alias uses); write it out without anchors")
        if len(path) > MAX_DEPTH:
            raise fail("yaml-limits", path, f"nested more than {MAX_DEPTH} levels deep")
        mark(path, node, first=True)
        if isinstance(node, yaml.ScalarNode):
            return scalar(node, path, _scalar_shape(shape))
        if node.tag not in (_MAP, _SEQ):
            raise fail("yaml-syntax", path, f"tag {node.tag!r} is not allowed; configs are plain YAML")
        if id(node) in active:
            raise fail("yaml-syntax", path, "an alias refers to a node that contains it; a config cannot contain itself")
        active.add(id(node))
        try:
            if isinstance(node, yaml.SequenceNode):
                return [convert(item, path + (i,), _child_shape(shape, i)) for i, item in enumerate(node.value)]
            return mapping(node, path, shape)
        finally:
            active.discard(id(node))

    def mapping(node: yaml.Node, path: PathKey, shape: Shape) -> dict[str, Any]:
        written: dict[str, tuple[yaml.Node, yaml.Node]] = {}
        merges = False
        for key_node, value_node in node.value:
            if key_node.tag == _MERGE:
                merges = True
                continue
            key = key_text(key_node, path)
            if key in written:
                mark(path + (key,), key_node, first=False)
                raise fail("yaml-duplicate-key", path + (key,), f"key {shown(key)} appears twice in the same mapping; keep one")
            written[key] = (key_node, value_node)
        winners = written
        if merges:  # later pairs win: merged ones in order, then the mapping's own
            winners = {key_text(k, path): (k, v) for k, v in merged_pairs(node, path) if k.tag != _MERGE}
            winners.update(written)
        result: dict[str, Any] = {}
        for key, (key_node, value_node) in winners.items():
            mark(path + (key,), key_node, first=False)
            result[key] = convert(value_node, path + (key,), _child_shape(shape, key))
        return result

    def merged_pairs(node: yaml.Node, path: PathKey) -> list[tuple[yaml.Node, yaml.Node]]:
        """`<<` merge keys (YAML 1.1's merge type, kept for anchors): merged pairs first, earlier sources winning."""
        own, merged = [], []
        for key_node, value_node in node.value:
            if key_node.tag != _MERGE:
                own.append((key_node, value_node))
                continue
            sources = value_node.value if isinstance(value_node, yaml.SequenceNode) else [value_node]
            for source in reversed(sources):
                if not isinstance(source, yaml.MappingNode):
                    raise fail("yaml-syntax", path, "a '<<' merge key takes a mapping or a list of mappings")
                if id(source) in active or source is node:
                    raise fail("yaml-syntax", path, "a '<<' merge refers to a mapping that contains it")
                active.add(id(source))
                try:
                    merged.extend(merged_pairs(source, path))
                finally:
                    active.discard(id(source))
        return merged + own

    def key_text(node: yaml.Node, path: PathKey) -> str:
        if not isinstance(node, yaml.ScalarNode) or node.tag not in (_PLAIN, _STR):
            raise fail("schema", path, "mapping keys must be plain text")
        return str(node.value)

    def scalar(node: yaml.Node, path: PathKey, shape: Shape) -> Any:
        text, tag = str(node.value), node.tag
        if tag == _STR:
            return text
        if tag == _PLAIN and shape == TEXT:
            return None if text in _CORE_NULL else text
        if tag not in (_PLAIN, _INT, _FLOAT, _BOOL, _NULL):
            raise fail("yaml-syntax", path, f"tag {node.tag!r} is not allowed; configs hold plain text, numbers, "
                       "true/false and null")
        try:
            core_tag, value = _core_value(text)
        except ValueError as exc:
            raise fail("schema", path, f"{exc}; quote it if it is text") from None
        if tag != _PLAIN:
            if core_tag != tag:
                raise fail("schema", path, f"{text!r} is not a valid {tag.rsplit(':', 1)[-1]}")
            return value
        if core_tag != _NULL:
            reason = _ambiguity(text, core_tag, value)
            if reason is not None:
                doc.findings.append(doc.problem("yaml-ambiguous", path, reason))  # reading goes on: report all
        return value

    return convert(node, (), shape)


def read_text(doc: Document, path: Path, stream: IO[bytes] | None = None) -> str:
    """A config's text: from `stream` when given, else from the regular file at `path`; at most MAX_FILE_BYTES.

    Anything but a regular file (a device such as /dev/zero, a FIFO, a
    socket) is refused without reading it; a FIFO is opened without
    blocking, so a path to one never hangs.
    """
    try:
        if stream is None:
            fd = os.open(path, os.O_RDONLY | getattr(os, "O_NONBLOCK", 0) | getattr(os, "O_NOCTTY", 0))
            with os.fdopen(fd, "rb") as opened:
                if not stat.S_ISREG(os.fstat(fd).st_mode):
                    raise ConfigError([doc.problem("file-unreadable", (), "not a regular file; give a config file or '-' for stdin")])
                data = opened.read(MAX_FILE_BYTES + 1)
        else:
            data = stream.read(MAX_FILE_BYTES + 1)
    except OSError as exc:
        raise ConfigError([doc.problem("file-unreadable", (), exc.strerror or str(exc))]) from None
    if len(data) > MAX_FILE_BYTES:
        raise ConfigError([doc.problem("yaml-limits", (), f"more than {MAX_FILE_BYTES} bytes; the limit is {MAX_FILE_BYTES}")])
    try:
        return data.decode("utf-8")
    except UnicodeDecodeError as exc:
        line = data.count(b"\n", 0, exc.start) + 1
        column = exc.start - (data.rfind(b"\n", 0, exc.start) + 1) + 1
        raise ConfigError([Problem("file-unreadable", "error", doc.file, line, column, "",
                                   f"not UTF-8 text ({exc.reason})")]) from None


def read_document(doc: Document, text: str, shape: Shape) -> None:
    """Parse `text` into `doc.data` under the core schema; every problem is raised as a located ConfigError."""
    loader = _CoreLoader(text)
    try:
        node = loader.get_single_node()
        doc.data = None if node is None else to_plain(doc, node, shape)
    except yaml.MarkedYAMLError as exc:
        mark = exc.problem_mark or exc.context_mark
        line, column = (mark.line + 1, mark.column + 1) if mark else (1, 1)
        context = exc.context
        if context and exc.context_mark and exc.problem_mark and exc.context_mark.line != exc.problem_mark.line:
            context += f" (started at line {exc.context_mark.line + 1}, column {exc.context_mark.column + 1})"
        message = " ".join(str(p) for p in (context, exc.problem) if p)
        raise ConfigError([Problem("yaml-syntax", "error", doc.file, line, column, "", message)]) from None
    except yaml.YAMLError as exc:
        raise ConfigError([doc.problem("yaml-syntax", (), str(exc).splitlines()[0])]) from None
    except RecursionError:  # PyYAML's pure-Python composer, used only without libyaml, recurses per level
        raise ConfigError([doc.problem("yaml-limits", (), "nested too deeply")]) from None
    finally:
        loader.dispose()
