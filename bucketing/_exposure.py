"""Exposure records and the sinks they go to.

A sink is one small interface (`write`, `flush`, `close`); the SDK ships an
in-memory sink, a JSON Lines file, Python logging and a user callback. A
sink that fails never breaks the caller: the assigner counts the failure.
"""

from __future__ import annotations

import json
import logging
import os
import threading
from datetime import datetime, timezone
from pathlib import Path
from typing import Any, Callable

RECORD_FIELDS = ("ts", "unit", "unit_type", "layer", "experiment", "arm", "config", "forced")


def utc_timestamp() -> str:
    """Now as ISO-8601 UTC with milliseconds, e.g. 2026-11-03T08:15:02.120Z."""
    return datetime.now(timezone.utc).isoformat(timespec="milliseconds").replace("+00:00", "Z")


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
    """

    def __init__(self, path: str | os.PathLike[str], *, fsync: bool = False) -> None:
        self.path = Path(path)
        self._fsync = fsync
        self._lock = threading.Lock()
        self._file = open(self.path, "a", encoding="utf-8")

    def write(self, record: dict[str, Any]) -> None:
        line = json.dumps(record, ensure_ascii=False, separators=(",", ":"), default=str) + "\n"
        with self._lock:
            self._file.write(line)
            self._file.flush()
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
            text = json.dumps(record, ensure_ascii=False, separators=(",", ":"), default=str)
            self.logger.log(self.level, text, extra={"exposure": record})


class CallbackSink(ExposureSink):
    """Calls a function of yours with each record (to feed a queue, a metrics client, ...)."""

    def __init__(self, callback: Callable[[dict[str, Any]], None]) -> None:
        self.callback = callback

    def write(self, record: dict[str, Any]) -> None:
        self.callback(record)
