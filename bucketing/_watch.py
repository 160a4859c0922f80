"""Watching a config file or folder: reload through `Assigner.reload` when it changes, never a half-written file.

Standard library only: a thread polls on an interval (or a test calls
`poll` itself). A change is loaded only once it has settled: two reads
`settle` seconds apart must agree on every file's bytes, inode, size and
modification and change times. The loaded config is kept only if the files
are still the same after loading, so a write that lands while the loader
reads cannot slip in. A config that fails to load is rejected, logged, and
the one serving stays.

What this cannot catch: a writer that stops for longer than `settle` in the
middle of a file. Deploy configs atomically (write a temporary file in the
same folder, then rename it over the old one) and no reader ever sees half
a file.
"""

from __future__ import annotations

import hashlib
import logging
import os
import stat
import threading
from dataclasses import dataclass
from datetime import datetime, timezone
from pathlib import Path
from typing import TYPE_CHECKING

from ._errors import ConfigError
from ._loader import config_files, load_config
from ._yaml import MAX_FILE_BYTES

if TYPE_CHECKING:
    from ._assigner import Assigner

logger = logging.getLogger("bucketing.watch")

FileState = tuple[str, ...]


@dataclass(frozen=True)
class ReloadAttempt:
    """One attempt to load a changed config.

    `ok` is True when the config loaded (and now serves); `version` is the
    version id serving after the attempt; `message` says what happened, with
    the located error of a rejected config.
    """

    at: datetime
    ok: bool
    version: str
    message: str


def _file_state(path: Path) -> FileState:
    """What identifies one file's content and write history, without trusting timestamps alone."""
    try:
        status = path.stat()
        if not stat.S_ISREG(status.st_mode):
            digest = "not a regular file"  # the loader refuses it; opening a FIFO here would block
        elif status.st_size > MAX_FILE_BYTES:
            digest = "too large to hash"  # the loader refuses it; its stat still tells a change
        else:
            with open(path, "rb") as file:
                digest = hashlib.sha256(file.read(MAX_FILE_BYTES + 1)).hexdigest()
    except OSError as exc:
        return (str(path), f"unreadable: {exc.strerror or exc}")
    return (str(path), str(status.st_ino), str(status.st_size), str(status.st_mtime_ns), str(status.st_ctime_ns),
            digest)


def snapshot(path: Path) -> tuple[FileState, ...]:
    """The state of every config file `path` names (itself, or a folder's YAML files)."""
    files = config_files(path) if path.is_dir() else [path]
    return tuple(_file_state(f) for f in files)


class ConfigWatcher:
    """Keeps an assigner on the latest good config at `path`, a file or a folder.

        watcher = ConfigWatcher(assigner, "configs/", interval=5).start()
        ...
        watcher.last_attempt   # ReloadAttempt(at, ok, version, message), or None before the first
        watcher.stop()

    `poll()` checks once (for tests, or a service that has its own timer).
    Every reload and every rejection is logged on logger `bucketing.watch`;
    a config that keeps failing is logged once until its files change.
    """

    def __init__(self, assigner: Assigner, path: str | os.PathLike[str], *, interval: float = 5.0,
                 settle: float = 0.5) -> None:
        self.assigner = assigner
        self.path = Path(path)
        self.interval = interval
        self.settle = settle
        self.reloads = 0
        self.rejections = 0
        self.last_attempt: ReloadAttempt | None = None
        self._seen: tuple[FileState, ...] | None = None
        self._poll_lock = threading.Lock()
        self._stopping = threading.Event()
        self._thread: threading.Thread | None = None

    def _wait_to_settle(self) -> bool:
        """Sleep `settle` seconds; False when the watcher is stopping meanwhile."""
        return not self._stopping.wait(self.settle)

    def poll(self) -> ReloadAttempt | None:
        """Look once; load a changed and settled config. Returns the attempt, or None when there was none."""
        with self._poll_lock:
            try:
                return self._poll()
            except Exception as exc:  # a watcher must never take the service down
                logger.exception("config watcher for %s failed; still serving %s", self.path, self.assigner.version)
                return self._record(False, f"watcher failed: {type(exc).__name__}: {exc}")

    def _poll(self) -> ReloadAttempt | None:
        before = snapshot(self.path)
        if before == self._seen:
            return None
        if not self._wait_to_settle() or snapshot(self.path) != before:
            logger.debug("config at %s is still changing; waiting for it to settle", self.path)
            return None
        serving = self.assigner.version
        try:
            config = load_config(self.path)
        except ConfigError as exc:
            if snapshot(self.path) != before:
                return None  # rewritten while being read: judge the new files at the next poll
            self._seen = before
            self.rejections += 1
            logger.warning("config at %s rejected; still serving %s: %s", self.path, serving, exc)
            return self._record(False, f"rejected: {exc}")
        if snapshot(self.path) != before:
            logger.debug("config at %s changed while it was loading; loading it again at the next poll", self.path)
            return None
        self._seen = before
        if config.version == serving:
            logger.info("config at %s read again; version %s unchanged", self.path, serving)
            return self._record(True, f"unchanged: version {serving}")
        self.assigner.reload(config)
        self.reloads += 1
        logger.info("config at %s reloaded: version %s replaces %s", self.path, config.version, serving)
        return self._record(True, f"reloaded: version {config.version} replaces {serving}")

    def _record(self, ok: bool, message: str) -> ReloadAttempt:
        attempt = ReloadAttempt(datetime.now(timezone.utc), ok, self.assigner.version, message)
        self.last_attempt = attempt
        return attempt

    def start(self) -> ConfigWatcher:
        """Poll now and then every `interval` seconds in a daemon thread, until `stop`."""
        if self._thread is None or not self._thread.is_alive():
            self._stopping.clear()
            self._thread = threading.Thread(target=self._run, name=f"config-watcher {self.path}", daemon=True)
            self._thread.start()
        return self

    def _run(self) -> None:
        while not self._stopping.is_set():
            self.poll()
            self._stopping.wait(self.interval)

    def stop(self, timeout: float | None = None) -> None:
        """Stop the thread and wait for it (at most `timeout` seconds)."""
        self._stopping.set()
        if self._thread is not None:
            self._thread.join(timeout)
            if self._thread.is_alive():
                return
        self._stopping.clear()  # `poll` works again after a stop

    def __enter__(self) -> ConfigWatcher:
        return self.start()

    def __exit__(self, *exc_info: object) -> None:
        self.stop()
