"""Exposure records and the sinks they go to.

A sink is one small interface (`write`, `flush`, `close`); the SDK ships an
in-memory sink, a JSON Lines file, Python logging and a user callback. A
sink that fails never breaks the caller: the assigner counts the failure and
logs it, at most once a minute.

`Exposer` turns an exposure into a record. It copies only an allow-list of
attributes (those the config targets on plus those the service names),
keeps every value valid JSON, can replace unit ids by a keyed pseudonym, and
can de-duplicate exposures within the process.
"""

from __future__ import annotations

import hashlib
import hmac
import json
import logging
import math
import os
import threading
from collections import Counter, OrderedDict
from datetime import datetime, timezone
from pathlib import Path
from time import monotonic
from typing import Any, Callable, Collection, Mapping

from ._errors import SortitionError

RECORD_FIELDS = ("ts", "unit", "unit_type", "layer", "experiment", "arm", "config", "forced")

logger = logging.getLogger("bucketing.sinks")


def utc_timestamp() -> str:
    """Now as ISO-8601 UTC with milliseconds, e.g. 2026-11-03T08:15:02.120Z."""
    return datetime.now(timezone.utc).isoformat(timespec="milliseconds").replace("+00:00", "Z")


def record_json(record: Mapping[str, Any]) -> str:
    """One record as compact JSON text; raises ValueError on NaN or Infinity, which JSON cannot carry."""
    return json.dumps(record, ensure_ascii=False, separators=(",", ":"), allow_nan=False, default=str)


def json_safe(value: Any) -> tuple[Any, bool]:
    """An attribute value as a record can carry it, and whether it had to be turned into text.

    NaN and Infinity are not JSON, and text that has no UTF-8 form (a lone
    surrogate) cannot be written to a file: such a value, or a list or
    mapping holding one, becomes its text, so that the rest of the record
    stays intact and valid.
    """
    if value is None or isinstance(value, (bool, int)):
        return value, False
    if isinstance(value, str):
        if value.isascii():
            return value, False
        try:
            value.encode("utf-8")
            return value, False
        except UnicodeEncodeError:
            return value.encode("utf-8", "backslashreplace").decode("ascii", "backslashreplace"), True
    if isinstance(value, float):
        return (value, False) if math.isfinite(value) else (str(value), True)
    try:
        json.dumps(value, allow_nan=False, default=str).encode("utf-8")
        return value, False
    except (ValueError, TypeError, RecursionError, UnicodeEncodeError):
        return json_safe(str(value))[0], True


class ExposureSink:
    """Where exposure records go. Subclasses implement `write`."""

    def write(self, record: dict[str, Any]) -> None:
        raise NotImplementedError

    def flush(self) -> None:
        """Push buffered records out; a no-op for unbuffered sinks."""

    def close(self) -> None:
        self.flush()


class MemorySink(ExposureSink):
    """Keeps records in a list: for tests and for services that batch them."""

    def __init__(self) -> None:
        self.records: list[dict[str, Any]] = []
        self._lock = threading.Lock()

    def write(self, record: dict[str, Any]) -> None:
        with self._lock:
            self.records.append(record)

    def clear(self) -> None:
        with self._lock:
            self.records.clear()


class JsonLinesSink(ExposureSink):
    """Appends one JSON object per line to a file; each line is written whole and flushed.

    Safe from several threads of one process (a lock serialises writes) and,
    because the file is opened in append mode and each record is one write
    call, lines from several processes do not interleave on local files.

    Rotation and deletion: at most every `check_every` seconds (0: before
    every write) the sink compares the file at `path` with the one it has
    open; when the file was renamed away (logrotate's default) or deleted,
    it opens a new one at `path` and counts it in `reopened`. Records written
    in between go to the renamed file; after a deletion they are lost with
    it. With `max_bytes`, the sink rotates the file itself before a line
    would take it past that size: `path` becomes `path.1`, `path.1` becomes
    `path.2`, ..., keeping `backups` old files. Size rotation is for one
    writing process; several processes writing one file should leave
    rotation to logrotate (rename mode, not `copytruncate`).
    """

    def __init__(self, path: str | os.PathLike[str], *, fsync: bool = False, max_bytes: int | None = None,
                 backups: int = 5, check_every: float = 1.0) -> None:
        if max_bytes is not None and max_bytes <= 0:
            raise ValueError(f"max_bytes must be positive, found {max_bytes}")
        if backups < 0:
            raise ValueError(f"backups must be 0 or more, found {backups}")
        self.path = Path(path)
        self.max_bytes = max_bytes
        self.backups = backups
        self.check_every = check_every
        self.reopened = 0
        self.rotated = 0
        self._fsync = fsync
        self._lock = threading.Lock()
        self._open()

    def _open(self) -> None:
        file = open(self.path, "ab")
        status = os.fstat(file.fileno())
        self._file = file
        self._identity = (status.st_dev, status.st_ino)
        self._size = status.st_size
        self._checked = monotonic()

    def _moved(self) -> bool:
        try:
            status = os.stat(self.path)
        except FileNotFoundError:
            return True
        return (status.st_dev, status.st_ino) != self._identity

    def _reopen(self) -> None:
        old = self._file
        self._open()
        old.close()

    def _rotate(self) -> None:
        """Shift path -> path.1 -> ... -> path.<backups> (the open file moves with its name), then reopen."""
        names = [self.path] + [self.path.with_name(f"{self.path.name}.{n}") for n in range(1, self.backups + 1)]
        try:
            if self.backups == 0:
                self.path.unlink(missing_ok=True)
            for older, newer in reversed(list(zip(names, names[1:]))):
                if older.exists():
                    os.replace(older, newer)
        finally:
            self._reopen()  # whatever failed, write on to the file now at `path`
        self.rotated += 1

    def write(self, record: dict[str, Any]) -> None:
        data = (record_json(record) + "\n").encode("utf-8", "backslashreplace")
        with self._lock:
            now = monotonic()
            if now - self._checked >= self.check_every:
                self._checked = now
                if self._moved():
                    self._reopen()
                    self.reopened += 1
                    logger.info("exposure file %s was moved or deleted; writing to a new file there", self.path)
            if self.max_bytes is not None and self._size and self._size + len(data) > self.max_bytes:
                try:
                    self._rotate()
                except OSError as exc:  # keep the record: write on past the limit, try again after another max_bytes
                    self._size = 0
                    logger.warning("exposure file %s could not be rotated; writing on: %s", self.path, exc)
            self._file.write(data)
            self._file.flush()
            self._size += len(data)
            if self._fsync:
                os.fsync(self._file.fileno())

    def close(self) -> None:
        with self._lock:
            if not self._file.closed:
                self._file.close()


class LoggingSink(ExposureSink):
    """Sends each record to a Python logger as JSON text, the record also in `extra['exposure']`."""

    def __init__(self, logger: str | logging.Logger = "sortition.exposure", level: int = logging.INFO) -> None:
        self.logger = logging.getLogger(logger) if isinstance(logger, str) else logger
        self.level = level

    def write(self, record: dict[str, Any]) -> None:
        if self.logger.isEnabledFor(self.level):
            self.logger.log(self.level, record_json(record), extra={"exposure": record})


class CallbackSink(ExposureSink):
    """Calls a function of yours with each record (to feed a queue, a metrics client, ...)."""

    def __init__(self, callback: Callable[[dict[str, Any]], None]) -> None:
        self.callback = callback

    def write(self, record: dict[str, Any]) -> None:
        self.callback(record)


def pseudonym_key(variable: str) -> bytes:
    """The pseudonym key held in environment variable `variable`; refuses an unset or empty one."""
    key = os.environ.get(variable, "")
    if not key:
        raise SortitionError(f"environment variable {variable} is unset or empty; it must hold the key "
                             "for unit pseudonyms (keep it out of the config and out of the logs)")
    return key.encode("utf-8")


def pseudonym(key: bytes, unit: str) -> str:
    """The keyed pseudonym of a unit id: HMAC-SHA256 of its UTF-8 text, as 64 hex digits."""
    return hmac.new(key, unit.encode("utf-8"), hashlib.sha256).hexdigest()


class Exposer:
    """Builds exposure records and hands them to the sink; never raises.

    `errors` is the assigner's counter: failed writes count under "sink",
    attribute values turned into text under "attribute_not_json".
    """

    FAILURE_LOG_EVERY = 60.0

    def __init__(self, sink: ExposureSink, errors: Counter[str], *, record_attributes: Collection[str] = (),
                 pseudonym_key: bytes | None = None, dedupe: bool = False, dedupe_limit: int = 100_000) -> None:
        self.sink = sink
        self.errors = errors
        self.record_attributes = frozenset(record_attributes)
        self.pseudonym_key = pseudonym_key
        self.dedupe = dedupe
        self.dedupe_limit = dedupe_limit
        self._seen: OrderedDict[tuple, None] = OrderedDict()
        self._lock = threading.Lock()
        self._failures_unlogged = 0
        self._failure_logged_at = -math.inf

    def _first_time(self, key: tuple) -> bool:
        """Whether `key` is new; the least recently seen key is forgotten past `dedupe_limit`."""
        with self._lock:
            if key in self._seen:
                self._seen.move_to_end(key)
                return False
            self._seen[key] = None
            if len(self._seen) > self.dedupe_limit:
                self._seen.popitem(last=False)
            return True

    def emit(self, unit_type: str, unit: str, layer: str, experiment: str, arm: str, config_version: str | None,
             forced: bool, attrs: Mapping[str, Any], targeted: frozenset[str]) -> None:
        try:
            if self.dedupe and not self._first_time((unit_type, unit, layer, experiment, arm)):
                return
            record: dict[str, Any] = {
                "ts": utc_timestamp(),
                "unit": unit if self.pseudonym_key is None else pseudonym(self.pseudonym_key, unit),
                "unit_type": unit_type,
                "layer": layer,
                "experiment": experiment,
                "arm": arm,
                "config": config_version,
                "forced": forced,
            }
            for attr, value in attrs.items():
                if (attr in targeted or attr in self.record_attributes) and attr not in RECORD_FIELDS:
                    record[attr], changed = json_safe(value)
                    if changed:
                        self.errors["attribute_not_json"] += 1
            self.sink.write(record)
        except Exception as exc:
            self.errors["sink"] += 1
            self._log_failure(exc)

    def _log_failure(self, exc: Exception) -> None:
        """A warning at most once per FAILURE_LOG_EVERY seconds, with the count of failures since the last."""
        with self._lock:
            self._failures_unlogged += 1
            now = monotonic()
            if now - self._failure_logged_at < self.FAILURE_LOG_EVERY:
                return
            count, self._failures_unlogged, self._failure_logged_at = self._failures_unlogged, 0, now
        logger.warning("exposure sink %s failed %d time(s) since the last such message; records were lost "
                       "(assigner.errors['sink'] counts them all): %s: %s",
                       type(self.sink).__name__, count, type(exc).__name__, exc)
