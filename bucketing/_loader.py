"""Reading config files: safe YAML with node marks, pydantic validation, merging.

Every error is located: file, line and column come from the YAML node marks,
kept for each field path while the document is turned into plain values.
"""

from __future__ import annotations

import hashlib
import json
from datetime import date, datetime
from pathlib import Path
from typing import Any, Iterable

import yaml
from pydantic import ValidationError

from ._config import Config, Document, Origin, PathKey
from ._errors import ConfigError, Problem
from ._model import NAME_PATTERN, RANGE_PATTERN, SALT_PATTERN, ConfigFile
from ._rules import structural_problems

MAX_FILE_BYTES = 5 * 1024 * 1024
MAX_NODES = 200_000
MAX_ALIASES = 1_000
CONFIG_SUFFIXES = (".yaml", ".yml")

_PLAIN_TAGS = ("tag:yaml.org,2002:map", "tag:yaml.org,2002:seq")
_MERGE_TAG = "tag:yaml.org,2002:merge"
_PATTERN_WORDS = {
    NAME_PATTERN: "a valid name: letters, digits, '_', '.' and '-', starting with a letter or digit "
                  "(names become parts of default salts)",
    SALT_PATTERN: "a valid salt: letters, digits, '_', '.' and '-' only",
    RANGE_PATTERN: "a bucket range such as '0-1999' or a single bucket such as '42'",
}


class _LimitedLoader(getattr(yaml, "CSafeLoader", yaml.SafeLoader)):  # type: ignore[misc]
    """Safe loading only (libyaml's parser when present): no object construction.
    Size and alias limits are enforced by `_to_plain`."""


def _to_plain(doc: Document, loader: _LimitedLoader, node: yaml.Node) -> Any:
    seen: set[int] = set()
    counts = {"nodes": 0, "aliases": 0}

    def convert(node: yaml.Node, path: PathKey) -> Any:
        counts["nodes"] += 1
        if id(node) in seen:
            counts["aliases"] += 1
        seen.add(id(node))
        if counts["nodes"] > MAX_NODES or counts["aliases"] > MAX_ALIASES:
            raise ConfigError([doc.problem("yaml-limits", path,
                f"document too large after expanding aliases (more than {MAX_NODES} nodes "
                f"or {MAX_ALIASES} alias uses); write it out without anchors")])
        doc.marks.setdefault(path, (node.start_mark.line + 1, node.start_mark.column + 1))
        if not isinstance(node, yaml.ScalarNode) and node.tag not in _PLAIN_TAGS:
            raise ConfigError([doc.problem("yaml-syntax", path, f"tag {node.tag!r} is not allowed; configs are plain YAML")])
        if isinstance(node, yaml.MappingNode):
            written = {id(k) for k, _ in node.value if k.tag != _MERGE_TAG}
            loader.flatten_mapping(node)  # `<<` merge keys: merged pairs first, the mapping's own after
            winners: dict[str, tuple[yaml.Node, yaml.Node]] = {}
            for key_node, value_node in node.value:
                key = scalar(key_node, path)
                if not isinstance(key, (str, int, float, bool)) or key is None:
                    raise ConfigError([doc.problem("schema", path, f"mapping key must be a plain scalar, found {key!r}")])
                key = str(key) if not isinstance(key, str) else key
                earlier = winners.get(key)
                if earlier is not None and id(earlier[0]) in written and id(key_node) in written:
                    child = path + (key,)
                    doc.marks[child] = (key_node.start_mark.line + 1, key_node.start_mark.column + 1)
                    raise ConfigError([doc.problem("yaml-duplicate-key", child,
                        f"key {key!r} appears twice in the same mapping; keep one")])
                winners[key] = (key_node, value_node)  # a key written here overrides a merged one
            result: dict[Any, Any] = {}
            for key, (key_node, value_node) in winners.items():
                child = path + (key,)
                doc.marks[child] = (key_node.start_mark.line + 1, key_node.start_mark.column + 1)
                result[key] = convert(value_node, child)
            return result
        if isinstance(node, yaml.SequenceNode):
            return [convert(item, path + (i,)) for i, item in enumerate(node.value)]
        return scalar(node, path)

    def scalar(node: yaml.Node, path: PathKey) -> Any:
        if not isinstance(node, yaml.ScalarNode):
            raise ConfigError([doc.problem("schema", path, "mapping keys must be plain scalars")])
        try:
            return loader.construct_object(node, deep=True)
        except yaml.constructor.ConstructorError as exc:
            raise ConfigError([doc.problem("yaml-syntax", path, str(exc.problem))]) from None
        except ValueError as exc:
            raise ConfigError([doc.problem("schema", path, f"{node.value!r} is not a valid {node.tag.rsplit(':', 1)[-1]}: {exc}")]) from None

    return convert(node, ())


def _read_document(path: Path, text: str | None = None) -> Document:
    doc = Document(file=str(path))
    if text is None:
        try:
            size = path.stat().st_size
            if size > MAX_FILE_BYTES:
                raise ConfigError([doc.problem("yaml-limits", (), f"file is {size} bytes; the limit is {MAX_FILE_BYTES}")])
            text = path.read_text(encoding="utf-8")
        except UnicodeDecodeError as exc:
            raise ConfigError([doc.problem("file-unreadable", (), f"not UTF-8 text ({exc.reason})")]) from None
        except OSError as exc:
            raise ConfigError([doc.problem("file-unreadable", (), exc.strerror or str(exc))]) from None
    loader = _LimitedLoader(text)
    try:
        node = loader.get_single_node()
        doc.data = None if node is None else _to_plain(doc, loader, node)
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
    finally:
        loader.dispose()
    return doc


def _schema_problems(doc: Document, exc: ValidationError) -> list[Problem]:
    problems = []
    for error in exc.errors(include_url=False):
        loc = tuple(error["loc"])
        message = error["msg"]
        if error["type"] == "extra_forbidden":
            message = f"unknown key {loc[-1]!r}"
        elif error["type"] == "missing":
            message = f"required key {loc[-1]!r} is missing"
        elif error["type"] == "string_pattern_mismatch":
            wanted = _PATTERN_WORDS.get(str(error.get("ctx", {}).get("pattern")), "a different form")
            message = f"{error['input']!r} is not {wanted}"
        elif "input" in error and not isinstance(error["input"], (dict, list)):
            message = f"{message}; found {error['input']!r}"
            if error["type"] in ("float_type", "int_type") and isinstance(error["input"], str):
                percent_sign = error["input"].strip().endswith("%")
                message += " (write the number without the % sign)" if percent_sign else " (write the number without quotes)"
        problems.append(doc.problem("schema", loc, message))
    return problems


def _canonical_value(value: Any) -> Any:
    if isinstance(value, dict):
        return {str(k): _canonical_value(v) for k, v in value.items()}
    if isinstance(value, list):
        return [_canonical_value(v) for v in value]
    if isinstance(value, (date, datetime)):
        return value.isoformat()
    return value


def config_version(documents: Iterable[Any]) -> str:
    """Config version id: first 12 hex digits of SHA-256 of the canonical JSON.

    The canonical form merges the files' plain data: `format`, `holdout`
    entries sorted by unit type, `layers` sorted by name, `weekly_units`
    merged; dates become ISO strings; keys sorted, no whitespace, UTF-8.
    It does not depend on key order, comments, quoting or how layers are
    spread over files.
    """
    merged: dict[str, Any] = {"format": 1, "holdout": [], "layers": [], "weekly_units": {}}
    for data in documents:
        merged["holdout"].extend(data.get("holdout") or [])
        merged["layers"].extend(data.get("layers") or [])
        merged["weekly_units"].update(data.get("weekly_units") or {})
    merged["holdout"].sort(key=lambda h: str(h.get("unit")))
    merged["layers"].sort(key=lambda layer: str(layer.get("name")))
    if not merged["weekly_units"]:
        del merged["weekly_units"]
    if not merged["holdout"]:
        del merged["holdout"]
    text = json.dumps(_canonical_value(merged), sort_keys=True, separators=(",", ":"), ensure_ascii=False)
    return hashlib.sha256(text.encode("utf-8")).hexdigest()[:12]


def config_files(path: Path) -> list[Path]:
    """The YAML files a path names: itself, or a directory's *.yaml/*.yml in name order."""
    if path.is_dir():
        return sorted(p for p in path.rglob("*") if p.is_file() and p.suffix in CONFIG_SUFFIXES)
    return [path]


def parse_config(source: str | Path | Iterable[str | Path], *, text: str | None = None) -> tuple[Config | None, list[Problem]]:
    """Read and merge config files without raising: (config or None, problems).

    Problems include schema errors and, once the files parse, every rule of
    `_rules.structural_problems` (errors and warnings alike).
    """
    sources = [source] if isinstance(source, (str, Path)) else list(source)
    paths: list[Path] = []
    for s in sources:
        p = Path(s)
        if text is None and not p.exists():
            return None, [Problem("file-unreadable", "error", str(p), 1, 1, "", "no such file or directory")]
        paths.extend(config_files(p) if text is None else [p])
    if not paths:
        return None, [Problem("file-unreadable", "error", str(sources[0]), 1, 1, "", "no .yaml or .yml files found")]

    problems: list[Problem] = []
    documents: list[tuple[Document, ConfigFile]] = []
    for p in paths:
        try:
            doc = _read_document(p, text)
        except ConfigError as exc:
            problems.extend(exc.problems)
            continue
        if not isinstance(doc.data, dict):
            problems.append(doc.problem("schema", (), "a config file is a mapping with `format: 1` and `layers`"))
            continue
        try:
            documents.append((doc, ConfigFile.model_validate(doc.data)))
        except ValidationError as exc:
            problems.extend(_schema_problems(doc, exc))
    if problems:
        return None, problems

    layers, layer_origins, holdouts, holdout_origins = [], [], [], []
    weekly: dict[str, int] = {}
    weekly_origins: dict[str, Origin] = {}
    for doc, parsed in documents:
        for i, layer in enumerate(parsed.layers):
            layers.append(layer)
            layer_origins.append(Origin(doc, ("layers", i)))
        for i, holdout in enumerate(parsed.holdout):
            holdouts.append(holdout)
            holdout_origins.append(Origin(doc, ("holdout", i)))
        for unit_type, count in parsed.weekly_units.items():
            if unit_type in weekly:
                problems.append(doc.problem("name-duplicate", ("weekly_units", unit_type),
                    f"weekly_units for {unit_type!r} is also given in {weekly_origins[unit_type].document.file}; keep one"))
            weekly[unit_type] = count
            weekly_origins[unit_type] = Origin(doc, ("weekly_units", unit_type))
    config = Config(
        layers=tuple(layers),
        holdouts=tuple(holdouts),
        weekly_units=weekly,
        version=config_version(doc.data for doc, _ in documents),
        files=tuple(str(p) for p in paths),
        _layer_origins=tuple(layer_origins),
        _holdout_origins=tuple(holdout_origins),
        _weekly_origins=weekly_origins,
    )
    problems.extend(structural_problems(config))
    return config, problems


def load_config(source: str | Path | Iterable[str | Path], *, text: str | None = None) -> Config:
    """Load, validate and merge a config file, a directory, or several of them.

    Raises ConfigError (every error located by file, line and column) when
    the config cannot be used; warnings do not stop loading. With `text`,
    the YAML is taken from that string and `source` only names it.
    """
    config, problems = parse_config(source, text=text)
    errors = [p for p in problems if p.severity == "error"]
    if errors or config is None:
        raise ConfigError(errors or problems)
    return config
