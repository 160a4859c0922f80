"""Finding the log files, and surveying each text log before a reader sees it.

`resolve_files` turns paths, globs and directories into files, each read
once (a `**` glob through a symbolic-link loop, or a file named twice,
yields it once), and refuses what is not a regular file (a device, a
FIFO) instead of reading it forever.

`survey_file` reads a JSON Lines or CSV file once, in blocks of bounded
size, whatever its lines are like: it finds lines longer than the cap
(`too_long`) and, in CSV, lines that leave a quote open (`unparseable`: a
record is one line, so an open quote never swallows the lines after it);
it tells an empty file, a CSV with only a header, and a file that cannot
be read at all (a gzip stream cut short, a header that is not UTF-8).
`clean_copy` writes a file with those lines blanked, so that a reader
never meets them and every other line keeps its number.
"""

from __future__ import annotations

import bisect
import errno
import glob
import gzip
import os
import stat
import zlib
from dataclasses import dataclass, field
from pathlib import Path
from typing import IO, BinaryIO, Iterable

from .._errors import LogError

FORMATS = {".jsonl": "jsonl", ".ndjson": "jsonl", ".json": "jsonl", ".csv": "csv", ".tsv": "tsv", ".parquet": "parquet"}
LOG_FORMATS = ("jsonl", "csv", "tsv", "parquet")
MAX_LINE_BYTES = 1 << 20  # a line longer than this is a malformed record (an exposure record takes well under 4 KB)
BLOCK_BYTES = 1 << 20  # the most a survey holds of a file at once
TEXT_CHARS = 300  # the start of a malformed record kept as its text
BYTE_ORDER_MARK = b"\xef\xbb\xbf"


@dataclass(frozen=True)
class LogFile:
    path: str
    format: str  # jsonl | csv | tsv | parquet
    compressed: bool


def format_of(path: str) -> tuple[str, bool] | None:
    """(format, gzip-compressed) from a file name, or None when the name does not say."""
    name = path.lower()
    compressed = name.endswith(".gz")
    if compressed:
        name = name[:-3]
    suffix = name[name.rfind("."):] if "." in name else ""
    kind = FORMATS.get(suffix)
    return (kind, compressed) if kind else None


def _kind_of(mode: int) -> str:
    if stat.S_ISCHR(mode) or stat.S_ISBLK(mode):
        return "a device"
    if stat.S_ISFIFO(mode):
        return "a FIFO (named pipe)"
    if stat.S_ISSOCK(mode):
        return "a socket"
    return "not a file"


def _regular_file(path: str) -> os.stat_result:
    """The file's status; a one-line error for anything a log cannot be (a device, a FIFO, a socket)."""
    try:
        status = os.stat(path)
    except FileNotFoundError:
        raise LogError(f"{path}: no such file or directory") from None
    except OSError as exc:
        raise LogError(f"{path}: cannot be opened ({exc.strerror or exc})") from None
    if not stat.S_ISREG(status.st_mode):
        raise LogError(f"{path}: not a regular file ({_kind_of(status.st_mode)}); give log files, globs or directories")
    return status


def _statuses(paths: list[str], found_by_search: bool) -> list[tuple[str, os.stat_result]]:
    """Each path with its status; a path a search found through too many links (a loop) is left out."""
    statuses = []
    for path in paths:
        try:
            statuses.append((path, _regular_file(path)))
        except LogError:
            if not (found_by_search and _loops(path)):
                raise
    return statuses


def _loops(path: str) -> bool:
    try:
        os.stat(path)
    except OSError as exc:
        return exc.errno == errno.ELOOP
    return False


def resolve_files(sources: Iterable[str | Path], default_format: str | None = None) -> list[LogFile]:
    """Files named by paths, globs and directories (searched recursively), in name order, each file once."""
    if default_format is not None and default_format not in LOG_FORMATS:
        raise LogError(f"unknown log format {default_format!r}; the formats are {', '.join(LOG_FORMATS)}")
    found: list[LogFile] = []
    seen: set[tuple[int, int]] = set()  # (device, inode): the same file reached twice is read once
    for source in map(str, sources):
        if any(ch in source for ch in "*?["):
            paths = [p for p in glob.glob(source, recursive=True) if not os.path.isdir(p)]
            if not paths:
                raise LogError(f"{source}: no files match this pattern")
        elif os.path.isdir(source):
            paths = [str(p) for p in Path(source).rglob("*") if p.is_file() and format_of(str(p))]
            if not paths:
                raise LogError(f"{source}: no .jsonl, .csv, .tsv or .parquet files (plain or .gz) in this directory")
        else:
            paths = [source]
        # the shortest of the paths to one file is the one kept: a path through a link loop is longer
        chosen = []
        for path, status in sorted(_statuses(paths, len(paths) > 1), key=lambda p: (p[0].count(os.sep), p[0])):
            if (status.st_dev, status.st_ino) in seen:
                continue
            seen.add((status.st_dev, status.st_ino))
            detected = format_of(path)
            if detected is None and default_format:
                detected = (default_format, path.lower().endswith(".gz"))
            if detected is None:
                raise LogError(f"{path}: unknown log format; name it .jsonl, .csv, .tsv or .parquet "
                               f"(optionally .gz), or give the format")
            if detected[0] == "parquet" and detected[1]:
                raise LogError(f"{path}: Parquet compresses inside the file; gzip around it is not supported")
            chosen.append(LogFile(path, *detected))
        found += sorted(chosen, key=lambda f: f.path)
    return found


# -- the survey of a text log ------------------------------------------------------------------------


@dataclass(frozen=True)
class BadLine:
    """A line no reader is given: its number (from 1), its kind of malformed record, what is wrong, its start."""

    line: int
    kind: str  # too_long | unparseable
    detail: str
    text: str


@dataclass
class Survey:
    """What one reading of a text log found."""

    unreadable: str | None = None  # why the file cannot be read at all (then nothing else is known)
    records: bool = False  # some non-blank line that is not a bad line (after the header line, for CSV)
    header: str | None = None  # CSV: the first line, decoded
    bad_lines: list[BadLine] = field(default_factory=list)


def open_bytes(log: LogFile) -> BinaryIO:
    stream: BinaryIO = gzip.open(log.path, "rb") if log.compressed else open(log.path, "rb")  # type: ignore[assignment]
    return stream


def survey_file(log: LogFile, max_line_bytes: int = MAX_LINE_BYTES) -> Survey:
    """Read a JSON Lines or CSV file once, holding at most a block of it, and say what it holds."""
    try:
        with open_bytes(log) as stream:
            return _LineSurvey(log.format in ("csv", "tsv"), max_line_bytes).read(stream)
    except EOFError:
        return Survey(unreadable="the gzip stream ends early: the file is cut short")
    except (gzip.BadGzipFile, zlib.error) as exc:
        return Survey(unreadable=f"not a readable gzip stream ({exc})")
    except OSError as exc:
        return Survey(unreadable=exc.strerror or str(exc))


class _LineSurvey:
    """The state of one survey: the current line's number, length so far, start, and open quote."""

    def __init__(self, csv: bool, max_line_bytes: int) -> None:
        self.csv = csv
        self.cap = max(1, max_line_bytes)
        self.line = 1
        self.length = 0
        self.head = b""
        self.quote_open = False
        self.header = b""
        self.found = Survey()

    def read(self, stream: IO[bytes]) -> Survey:
        # Blocks no longer than the cap: a line inside one block is never too long, so only lines that
        # cross a block boundary need their length added up.
        size = min(self.cap, BLOCK_BYTES)
        block = stream.read(size)
        if block.startswith(BYTE_ORDER_MARK):
            block = block[len(BYTE_ORDER_MARK):]
        while block:
            self._block(block)
            block = stream.read(size)
        if self.length or self.head:
            self._line_ends()
        if self.csv:
            self._read_header()
        return self.found

    def _block(self, block: bytes) -> None:
        if self.csv and b'"' in block:  # quotes must be counted line by line
            for index, part in enumerate(block.split(b"\n")):
                if index:
                    self._line_ends()
                self._extend(part)
                self.quote_open ^= bool(part.count(b'"') & 1)
            return
        first = block.find(b"\n")
        if first < 0:
            self._extend(block)
            return
        self._extend(block[:first])
        self._line_ends()
        last = block.rfind(b"\n")
        # the lines between the first and the last line end are whole, short, and (here) without quotes
        self.found.records = self.found.records or bool(block[first + 1:last].strip())
        self.line += block.count(b"\n", first + 1, last + 1)
        self._extend(block[last + 1:])

    def _extend(self, part: bytes) -> None:
        if len(self.head) < TEXT_CHARS:
            self.head += part[:TEXT_CHARS - len(self.head)]
        if self.line == 1 and self.csv and len(self.header) <= self.cap:
            self.header += part[:self.cap + 1 - len(self.header)]
        self.length += len(part)

    def _line_ends(self) -> None:
        text = self.head.decode("utf-8", errors="replace").rstrip("\r")
        good = False
        if self.length > self.cap:
            self.found.bad_lines.append(BadLine(self.line, "too_long", f"a line of {self.length:,} bytes, over the "
                                                f"limit of {self.cap:,} bytes for one record", text))
        elif self.quote_open:
            self.found.bad_lines.append(BadLine(self.line, "unparseable", "a quote opened and not closed on this "
                                                "line (a record is one line)", text))
        else:
            good = bool(self.head.strip()) or self.length > len(self.head)
        if good and not (self.csv and self.line == 1):
            self.found.records = True
        self.line += 1
        self.length = 0
        self.head = b""
        self.quote_open = False

    def _read_header(self) -> None:
        if len(self.header) > self.cap:
            self.found.unreadable = f"the header line is longer than {self.cap:,} bytes"
            return
        try:
            header = self.header.decode("utf-8")
        except UnicodeDecodeError as exc:
            self.found.unreadable = f"the header line is not UTF-8 text (byte {exc.start + 1})"
            return
        if header.strip():
            self.found.header = header
        elif self.found.records:
            self.found.unreadable = "empty header line; a CSV log starts with the column names"
        self.found.bad_lines = [b for b in self.found.bad_lines if b.line > 1]


def clean_copy(log: LogFile, blank: Iterable[int], path: Path) -> LogFile:
    """An uncompressed copy of the log at `path` with the lines numbered in `blank` left empty."""
    blanked = set(blank)
    lines = sorted(blanked)
    with open_bytes(log) as source, open(path, "wb") as out:
        line = 1
        while block := source.read(BLOCK_BYTES):
            ends = block.count(b"\n")
            nearest = bisect.bisect_left(lines, line)
            if nearest == len(lines) or lines[nearest] > line + ends:
                out.write(block)
                line += ends
                continue
            for index, part in enumerate(block.split(b"\n")):
                if index:
                    out.write(b"\n")
                    line += 1
                if line not in blanked:
                    out.write(part)
    return LogFile(str(path), log.format, False)
