"""Reading config files: safe YAML with node marks, pydantic validation, merging.

Every error is located: file, line and column come from the YAML node marks,
kept for each field path while the document is turned into plain values.
"""

from __future__ import annotations

import hashlib
import json
import re
from datetime import date, datetime
from pathlib import Path
from typing import IO, Any, Iterable, NamedTuple

from pydantic import ValidationError

from ._config import Config, Document, Origin
from ._errors import ConfigError, Problem, did_you_mean, shown
from ._model import NAME_PATTERN, RANGE_PATTERN, SALT_PATTERN, ConfigFile, Holdout, Layer
from ._rules import structural_problems
from ._yaml import field_names, read_document, read_text, shape_of

CONFIG_SUFFIXES = (".yaml", ".yml")

_PATTERN_WORDS = {
    NAME_PATTERN: "a valid name: letters, digits, '_', '.' and '-', starting with a letter or digit "
                  "(names become parts of default salts)",
    SALT_PATTERN: "a valid salt: letters, digits, '_', '.' and '-' only",
    RANGE_PATTERN: "a bucket range such as '0-1999' or a single bucket such as '42'",
}


_FILE_SHAPE = shape_of(ConfigFile)


def _read_document(path: Path, text: str | IO[bytes] | None = None) -> Document:
    doc = Document(file=str(path))
    if not isinstance(text, str):
        text = read_text(doc, path, text)
    read_document(doc, text, _FILE_SHAPE)
    return doc


def _schema_problems(doc: Document, exc: ValidationError) -> list[Problem]:
    problems = []
    for error in exc.errors(include_url=False):
        loc = tuple(error["loc"])
        message = error["msg"]
        found = error.get("input")
        if error["type"] == "extra_forbidden":
            message = f"unknown key {shown(loc[-1])}" + did_you_mean(str(loc[-1]), field_names(_FILE_SHAPE, loc[:-1]))
        elif error["type"] == "missing":
            message = f"required key {loc[-1]!r} is missing"
        elif error["type"] == "string_pattern_mismatch":
            wanted = _PATTERN_WORDS.get(str(error.get("ctx", {}).get("pattern")), "a different form")
            message = f"{shown(found)} is not {wanted}"
        elif error["type"] == "literal_error" and isinstance(found, str):
            message = f"{message}; found {shown(found)}" + did_you_mean(found, _literal_choices(error))
        elif error["type"] == "value_error":
            message = message.removeprefix("Value error, ")
        elif "input" in error and not isinstance(found, (dict, list)):
            message = f"{message}; found {shown(found)}"
            if error["type"] in ("float_type", "int_type") and isinstance(error["input"], str):
                percent_sign = error["input"].strip().endswith("%")
                message += " (write the number without the % sign)" if percent_sign else " (write the number without quotes)"
        problems.append(doc.problem("schema", loc, message))
    return problems


def _literal_choices(error: Any) -> list[str]:
    """The allowed words of a Literal field, from pydantic's "'a', 'b' or 'c'" context text."""
    return re.findall(r"'([^']*)'", str(error.get("ctx", {}).get("expected", "")))


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
    """The YAML files a path names: itself, or a directory's *.yaml/*.yml in name order.

    Entries of a directory that are not regular files (a FIFO named x.yaml)
    are listed too, so that reading them reports them rather than skipping them.
    """
    if path.is_dir():
        return sorted(p for p in path.rglob("*") if p.suffix in CONFIG_SUFFIXES and not p.is_dir())
    return [path]


def parse_config(source: str | Path | Iterable[str | Path], *,
                 text: str | IO[bytes] | None = None) -> tuple[Config | None, list[Problem]]:
    """Read and merge config files without raising: (config or None, problems).

    With `text` (a string, or a binary stream such as stdin, read up to the
    same size cap as files), the YAML comes from there and `source` only
    names it. Problems include schema errors and every rule of
    `_rules.structural_problems` (errors and warnings alike). One file's
    error hides nothing else: the other files are still read, and the rules
    run over those that parsed; the config is None when any file failed.
    """
    sources = [source] if isinstance(source, (str, Path)) else list(source)
    if text is not None and not isinstance(text, str):
        try:
            text = read_text(Document(file=str(sources[0]) if sources else "<stdin>"), Path("-"), text)
        except ConfigError as exc:
            return None, exc.problems
    paths: list[Path] = []
    problems: list[Problem] = []
    for s in sources:
        p = Path(s)
        if text is None and not p.exists():
            problems.append(Problem("file-unreadable", "error", str(p), 1, 1, "", "no such file or directory"))
            continue
        paths.extend(config_files(p) if text is None else [p])
    if not paths and not problems:
        return None, [Problem("file-unreadable", "error", str(sources[0]) if sources else "<config>", 1, 1, "",
                              "no .yaml or .yml files found")]

    documents: list[tuple[Document, _Parsed]] = []
    for p in paths:
        try:
            doc = _read_document(p, text)
        except ConfigError as exc:
            problems.extend(exc.problems)
            continue
        problems.extend(doc.findings)
        if not isinstance(doc.data, dict):
            problems.append(doc.problem("schema", (), "a config file is a mapping with `format: 1` and `layers`"))
            continue
        refused = {p.loc for p in doc.findings}
        try:
            parsed = ConfigFile.model_validate(doc.data)
        except ValidationError as exc:
            problems.extend(p for p in _schema_problems(doc, exc) if p.loc not in refused)
            parsed = None
        if parsed is not None and not refused:
            documents.append((doc, _Parsed(list(enumerate(parsed.layers)), list(enumerate(parsed.holdout)),
                                           parsed.weekly_units)))
        else:
            documents.append((doc, _valid_parts(doc.data, {loc[:2] for loc in refused})))
    failed = bool(problems)
    config = _merge(documents, [str(p) for p in paths], problems)
    problems.extend(structural_problems(config))
    return (None if failed else config), problems


class _Parsed(NamedTuple):
    """What of one file validated: layers and holdouts with their index in the file, weekly_units.

    `complete` is False for the valid parts of a file that failed validation.
    """

    layers: list[tuple[int, Layer]]
    holdouts: list[tuple[int, Holdout]]
    weekly_units: dict[str, int]
    complete: bool = True


def _valid_parts(data: dict[str, Any], refused: set[tuple]) -> _Parsed:
    """The layers and holdouts of a file that failed which are valid on their own and hold no refused value.

    The cross-field rules still run over them, so that one layer's typo does
    not hide another layer's overlap; `refused` holds ("layers", i) and
    ("holdout", i) of the parts with a value refused while reading.
    """
    def valid(key: str, model: type[Layer] | type[Holdout]) -> list:
        items = data.get(key)
        kept = []
        for i, item in enumerate(items if isinstance(items, list) else []):
            if (key, i) in refused:
                continue
            try:
                kept.append((i, model.model_validate(item)))
            except ValidationError:
                pass  # reported already, by the validation of the whole file
        return kept

    return _Parsed(valid("layers", Layer), valid("holdout", Holdout), {}, complete=False)


def _merge(documents: list[tuple[Document, _Parsed]], files: list[str], problems: list[Problem]) -> Config:
    """One Config from the parsed files, with where each layer and holdout came from."""
    layers, layer_origins, holdouts, holdout_origins = [], [], [], []
    weekly: dict[str, int] = {}
    weekly_origins: dict[str, Origin] = {}
    for doc, parsed in documents:
        for i, layer in parsed.layers:
            layers.append(layer)
            layer_origins.append(Origin(doc, ("layers", i)))
        for i, holdout in parsed.holdouts:
            holdouts.append(holdout)
            holdout_origins.append(Origin(doc, ("holdout", i)))
        for unit_type, count in parsed.weekly_units.items():
            if unit_type in weekly:
                problems.append(doc.problem("name-duplicate", ("weekly_units", unit_type),
                    f"weekly_units for {unit_type!r} is also given in {weekly_origins[unit_type].document.file}; keep one"))
            weekly[unit_type] = count
            weekly_origins[unit_type] = Origin(doc, ("weekly_units", unit_type))
    return Config(
        layers=tuple(layers),
        holdouts=tuple(holdouts),
        weekly_units=weekly,
        # Over complete files only: the version of a config that failed is never used, and a failed file's
        # data need not have the shape the version's canonical form expects.
        version=config_version(doc.data for doc, parsed in documents if parsed.complete),
        files=tuple(files),
        _layer_origins=tuple(layer_origins),
        _holdout_origins=tuple(holdout_origins),
        _weekly_origins=weekly_origins,
    )


def load_config(source: str | Path | Iterable[str | Path], *, text: str | IO[bytes] | None = None) -> Config:
    """Load, validate and merge a config file, a directory, or several of them.

    Raises ConfigError (every error located by file, line and column) when
    the config cannot be used; warnings do not stop loading. With `text`,
    the YAML is taken from that string or binary stream and `source` only
    names it.
    """
    config, problems = parse_config(source, text=text)
    errors = [p for p in problems if p.severity == "error"]
    if errors or config is None:
        raise ConfigError(errors or problems)
    return config
