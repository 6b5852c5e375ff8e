"""Saved analyses ("runs") and sample history.

Public names
------------
RunStore
    The store: a database (SQLite in the data folder by default, or
    PostgreSQL by URL) plus a folder of content-addressed files. Save, get,
    list and filter, update, read back (arrays, files, the sequence cube),
    delete, export to and import from a zip, and check integrity.
RunInfo, Run, StoredFile, CheckReport
    What the store hands back.
KINDS, SCHEMA_VERSION, DATA_ENV, DATABASE_URL_ENV
    The kinds of analysis a run can hold; the schema this code writes; the
    environment variables that choose the store.
default_data_dir, resolve_data_dir, validate_name, safe_name, validate_labels
    Where the store lives; the rules for stored file names and for labels.
history_table, HistoryTable, summary_value, numeric_summary_keys
    A summary number over time for a sample or tag, with individuals-chart
    control limits (pure computation, no database).
compare_maps
    Two maps on a shared colour scale and their difference.

What a run holds
----------------
kind, sample name, tags, free-text note, who saved it (a name typed in;
there are no accounts), the time (UTC), the filmcalc version, the settings
(JSON), the summary numbers (JSON, small), the provenance record (JSON:
filmcalc version, time, SHA-256 of every input and output, plus whatever the
analysis recorded), and files in two roles: ``input`` (the stack file, the
photo, spectra, the recording) and ``output`` (arrays as ``.npy``, tables,
the sequence cube as ``cube.zarr.zip``).

Layout on disk
--------------
::

    DATA/runs.sqlite          the database (with -wal and -shm beside it while in use)
    DATA/files/ab/abcdef...   every stored file, named by the SHA-256 of its bytes
    DATA/files/tmp/           files being written (a save in progress, or one that was killed)

The same bytes are stored once, whatever their names and however many runs
use them. A file's *logical* name (``thickness_nm.npy``, ``frames/f001.png``)
lives only in the database: it is checked against a strict pattern (see
:func:`validate_name`) and never becomes a path. Nothing stored is executed or
unpickled: arrays are read with ``allow_pickle=False`` after their header is
checked, and the cube's Zarr metadata is checked against a list of plain
numeric types and codecs before Zarr opens it.

Saving
------
Every file is first written to ``files/tmp`` and hashed. Then, in one database
transaction that holds the store's write lock (``BEGIN IMMEDIATE`` on SQLite;
a ``SELECT ... FOR UPDATE`` of the ``store`` row on PostgreSQL), the files are
moved into place (``os.replace``, atomic) and the run's rows inserted; the
commit makes the run visible. A save killed at any point leaves no visible
run: at worst files in ``files/tmp`` or stored files that no run uses, which
:meth:`RunStore.check` reports as orphans (and removes with
``delete_orphans=True``). Deleting a run removes its rows in one transaction
and then, in another, the files no other run uses, so a crash between the two
leaves orphans, never a run with missing files.

Schema versions
---------------
1. Tables ``runs``, ``run_tags``, ``run_files``, ``schema_version``, ``store``.
2. ``runs.bytes_stored`` (the size of a run's files, filled in for old runs)
   and indexes for the history and filter queries: ``runs(sample,
   created_utc)``, ``runs(created_utc)``, ``run_tags(tag)``.

A new store is made by the version-1 tables plus every migration, so a fresh
store and an upgraded one are the same. A store written by a newer filmcalc is
refused with a message rather than misread.
"""

from __future__ import annotations

import contextlib
import copy
import dataclasses
import datetime as _dt
import functools
import hashlib
import json
import math
import os
import random
import re
import secrets
import shutil
import sys
import tempfile
import time
import zipfile
from pathlib import Path, PurePosixPath

import numpy as np
import sqlalchemy as sa

from . import __version__
from .errors import FilmcalcError

__all__ = [
    "DATABASE_URL_ENV",
    "DATA_ENV",
    "KINDS",
    "SCHEMA_VERSION",
    "CheckReport",
    "HistoryTable",
    "Run",
    "RunInfo",
    "RunStore",
    "StoredFile",
    "compare_maps",
    "default_data_dir",
    "history_table",
    "numeric_summary_keys",
    "resolve_data_dir",
    "safe_name",
    "summary_value",
    "validate_labels",
    "validate_name",
]

KINDS = {
    "spectrum": "reflectance spectrum of a stack",
    "colour": "the film's colour at one thickness",
    "chart": "colour chart",
    "match": "thicknesses that show a colour",
    "map": "photo → thickness map",
    "fit": "spectrum fit",
    "fit-map": "map of spectra",
    "fringes": "fringe analysis",
    "sequence": "frame sequence",
}
ROLES = ("input", "output")
SCHEMA_VERSION = 2
DATA_ENV = "FILMCALC_DATA"
DATABASE_URL_ENV = "FILMCALC_DATABASE_URL"
DATABASE_FILE = "runs.sqlite"

# Limits (our choices): small JSON keeps listing 10,000 runs fast; the import limits refuse zip bombs.
MAX_SUMMARY_BYTES = 64 << 10
MAX_JSON_BYTES = 16 << 20          # settings and provenance, each
MAX_TEXT = {"sample": 200, "saved_by": 100, "note": 10_000}
MAX_TAG_CHARS = 50
MAX_TAGS = 50
MAX_IMPORT_MEMBER_BYTES = 32 << 30
MAX_IMPORT_TOTAL_BYTES = 64 << 30
MAX_IMPORT_MEMBERS = 200_000
MAX_COMPRESSION_RATIO = 1100       # deflate cannot exceed about 1032:1, so a larger declared ratio is a lie
TEMP_GRACE_S = 3600.0              # temporary files younger than this may belong to a save in progress
SQLITE_BUSY_TIMEOUT_MS = 60_000

_SEGMENT = re.compile(r"[A-Za-z0-9][A-Za-z0-9._-]{0,99}")
MAX_NAME_SEGMENTS = 4              # e.g. frames/f0001.png; each segment matches _SEGMENT
MAX_NAME_CHARS = 255
_RUN_ID = re.compile(r"[A-Za-z0-9][A-Za-z0-9_-]{3,39}")
_SHA256 = re.compile(r"[0-9a-f]{64}")
_TIME_FORMAT = "%Y-%m-%dT%H:%M:%S.%fZ"
_TIME = re.compile(r"\d{4}-\d\d-\d\dT\d\d:\d\d:\d\d\.\d{6}Z")
_CONTROL = re.compile(r"[\x00-\x08\x0b-\x1f\x7f]")

_MEDIA_TYPES = {".npy": "application/x-npy", ".toml": "application/toml", ".json": "application/json",
                ".csv": "text/csv", ".tsv": "text/tab-separated-values", ".txt": "text/plain",
                ".png": "image/png", ".jpg": "image/jpeg", ".jpeg": "image/jpeg", ".tif": "image/tiff",
                ".tiff": "image/tiff", ".pdf": "application/pdf", ".zip": "application/zip",
                ".gif": "image/gif", ".mp4": "video/mp4", ".avi": "video/x-msvideo", ".mov": "video/quicktime",
                ".mkv": "video/x-matroska"}
_ALREADY_COMPRESSED = {".zip", ".png", ".jpg", ".jpeg", ".gif", ".mp4", ".avi", ".mov", ".mkv", ".pdf"}


# ----------------------------------------------------------------------------------------------
# Where the store lives
# ----------------------------------------------------------------------------------------------

def default_data_dir():
    """The per-user data folder used when neither ``--data-dir`` nor ``FILMCALC_DATA`` is given.

    Linux and other Unix: ``$XDG_DATA_HOME/filmcalc``, else ``~/.local/share/filmcalc``;
    macOS: ``~/Library/Application Support/filmcalc``; Windows: ``%LOCALAPPDATA%\\filmcalc``.
    """
    if sys.platform == "darwin":
        return Path.home() / "Library" / "Application Support" / "filmcalc"
    if os.name == "nt":
        base = os.environ.get("LOCALAPPDATA") or str(Path.home() / "AppData" / "Local")
        return Path(base) / "filmcalc"
    base = os.environ.get("XDG_DATA_HOME") or str(Path.home() / ".local" / "share")
    return Path(base) / "filmcalc"


def resolve_data_dir(data_dir=None):
    """The data folder: ``data_dir`` if given, else ``$FILMCALC_DATA``, else :func:`default_data_dir`."""
    if data_dir:
        return Path(data_dir).expanduser()
    if os.environ.get(DATA_ENV):
        return Path(os.environ[DATA_ENV]).expanduser()
    return default_data_dir()


# ----------------------------------------------------------------------------------------------
# Names
# ----------------------------------------------------------------------------------------------

def validate_name(name):
    """Check a stored file's logical name and return it.

    A name is one to four segments joined by ``/``; each segment starts with a
    letter or digit and holds only letters, digits, ``.``, ``_`` and ``-`` (at
    most 100 characters). So ``..``, absolute paths, backslashes, drive letters
    and empty segments cannot occur. Names are labels: the store never uses
    them as paths.

    Raises
    ------
    FilmcalcError
        With the rule the name broke.

    Examples
    --------
    >>> validate_name("frames/f0001.png")
    'frames/f0001.png'
    """
    if not isinstance(name, str) or not name:
        raise FilmcalcError("A stored file needs a name (letters, digits, '.', '_', '-').")
    if len(name) > MAX_NAME_CHARS:
        raise FilmcalcError(f"The file name {name[:40]!r}… is longer than {MAX_NAME_CHARS} characters.")
    if "\\" in name or name.startswith("/") or re.match(r"[A-Za-z]:", name):
        raise FilmcalcError(f"{name!r}: stored names are relative, with '/' between parts (no backslash, "
                            "leading '/' or drive letter).")
    segments = name.split("/")
    if len(segments) > MAX_NAME_SEGMENTS:
        raise FilmcalcError(f"{name!r} has more than {MAX_NAME_SEGMENTS} parts.")
    for segment in segments:
        if segment in ("", ".", ".."):
            raise FilmcalcError(f"{name!r}: empty, '.' and '..' parts are not allowed.")
        if not _SEGMENT.fullmatch(segment):
            raise FilmcalcError(f"{name!r}: each part must start with a letter or digit and hold only letters, "
                                "digits, '.', '_' and '-' (at most 100 characters).")
    return name


def unique_name(name, taken):
    """``name``, or ``stem-2.suffix``, ``stem-3.suffix``… when ``taken`` (a set or dict of stored names)
    has it already: two inputs with the same file name keep both."""
    if name not in taken:
        return name
    stem, dot, suffix = name.rpartition(".")
    stem, suffix = (stem, "." + suffix) if dot and stem else (name, "")
    k = 2
    while f"{stem}-{k}{suffix}" in taken:
        k += 1
    return f"{stem}-{k}{suffix}"


def safe_name(filename, fallback="file"):
    """A valid one-segment name made from a file name as the user had it.

    Only the last path component is kept; other characters become ``_``.

    Examples
    --------
    >>> safe_name("C:\\\\photos\\\\wafer 7 (top).png")
    'wafer_7_top_.png'
    >>> safe_name("../../etc/passwd")
    'passwd'
    """
    base = str(filename).replace("\\", "/").rstrip("/").split("/")[-1]
    cleaned = re.sub(r"[^A-Za-z0-9._-]+", "_", base)
    cleaned = re.sub(r"^[^A-Za-z0-9]+", "", cleaned)
    if not cleaned:
        cleaned = fallback
    if len(cleaned) > 100:
        stem, dot, suffix = cleaned.rpartition(".")
        cleaned = (stem[:100 - len(suffix) - 1] + "." + suffix) if dot and len(suffix) < 12 else cleaned[:100]
    return cleaned


def _media_type(name):
    return _MEDIA_TYPES.get(PurePosixPath(name).suffix.lower(), "application/octet-stream")


def _clean_text(value, what):
    text = "" if value is None else str(value).replace("\r\n", "\n").strip()
    if _CONTROL.search(text) or (what != "note" and "\n" in text):
        raise FilmcalcError(f"The {what.replace('_', ' ')} must be plain text on one line (no control characters).")
    if len(text) > MAX_TEXT[what]:
        raise FilmcalcError(f"The {what.replace('_', ' ')} is longer than {MAX_TEXT[what]} characters.")
    return text


def _clean_tags(tags):
    if tags is None:
        return []
    if isinstance(tags, str):
        tags = [tags]
    out = []
    for tag in tags:
        text = " ".join(str(tag).split())
        if not text:
            continue
        if _CONTROL.search(text) or "," in text or len(text) > MAX_TAG_CHARS:
            raise FilmcalcError(f"Tag {text[:60]!r}: a tag is up to {MAX_TAG_CHARS} characters of plain text "
                                "without commas.")
        if text not in out:
            out.append(text)
    if len(out) > MAX_TAGS:
        raise FilmcalcError(f"A run takes at most {MAX_TAGS} tags.")
    return out


def validate_labels(sample="", tags=(), note="", saved_by=""):
    """Check a run's sample, tags, note and saved-by name before a long analysis; return them cleaned.

    Returns
    -------
    dict
        ``sample``, ``tags`` (list, duplicates dropped), ``note``, ``saved_by``.

    Raises
    ------
    FilmcalcError
        Text with control characters, a multi-line sample or name, a tag with a comma, too long.
    """
    return {"sample": _clean_text(sample, "sample"), "tags": _clean_tags(tags), "note": _clean_text(note, "note"),
            "saved_by": _clean_text(saved_by, "saved_by")}


def _check_run_id(run_id):
    if not isinstance(run_id, str) or not _RUN_ID.fullmatch(run_id):
        raise FilmcalcError(f"{str(run_id)[:60]!r} is not a run id (letters and digits, as `filmcalc runs list` "
                            "shows them).")
    return run_id


def _new_run_id():
    return secrets.token_hex(6)


def _now_utc():
    return _dt.datetime.now(_dt.UTC).strftime(_TIME_FORMAT)


def _as_utc_text(value, what):
    """A date or time (datetime, date, or ISO text; naive means UTC) → the stored text form."""
    if isinstance(value, str):
        text = value.strip()
        try:
            value = _dt.datetime.fromisoformat(text)
        except ValueError:
            raise FilmcalcError(f"{what} must be a date or time like 2026-12-01 or 2026-12-01T14:30 "
                                f"(got {text!r}).") from None
    elif isinstance(value, _dt.date) and not isinstance(value, _dt.datetime):
        value = _dt.datetime(value.year, value.month, value.day)
    if value.tzinfo is not None:
        value = value.astimezone(_dt.UTC).replace(tzinfo=None)
    return value.strftime(_TIME_FORMAT)


def _plain(value):
    """JSON-ready copy: numpy scalars and arrays become Python values, NaN and ±inf become None."""
    if isinstance(value, dict):
        return {str(k): _plain(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_plain(v) for v in value]
    if isinstance(value, np.ndarray):
        return _plain(value.tolist())
    if isinstance(value, (bool, np.bool_)):
        return bool(value)
    if isinstance(value, (int, np.integer)):
        return int(value)
    if isinstance(value, (float, np.floating)):
        number = float(value)
        return number if math.isfinite(number) else None
    if value is None or isinstance(value, str):
        return value
    if isinstance(value, os.PathLike):
        return os.fspath(value)
    raise TypeError(f"{type(value).__name__} cannot be stored in a run's JSON fields")


def _to_json(value, what, limit):
    if value is None:
        value = {}
    if not isinstance(value, dict):
        raise TypeError(f"a run's {what} must be a dict")
    text = json.dumps(_plain(value), ensure_ascii=False, separators=(",", ":"), allow_nan=False)
    if len(text.encode()) > limit:
        raise FilmcalcError(f"The run's {what} is {len(text.encode()) / 1024:.0f} KiB of JSON, over the limit "
                            f"of {limit / 1024:.0f} KiB; store large records as a file of the run instead.")
    return text


# ----------------------------------------------------------------------------------------------
# Schema
# ----------------------------------------------------------------------------------------------

def _schema(version):
    """The tables as of schema ``version`` (SQLAlchemy Core metadata)."""
    meta = sa.MetaData()
    run_columns = [
        sa.Column("id", sa.String(40), primary_key=True),
        sa.Column("kind", sa.String(20), nullable=False),
        sa.Column("sample", sa.String(MAX_TEXT["sample"]), nullable=False, server_default=""),
        sa.Column("saved_by", sa.String(MAX_TEXT["saved_by"]), nullable=False, server_default=""),
        sa.Column("note", sa.Text, nullable=False, server_default=""),
        sa.Column("created_utc", sa.String(27), nullable=False),
        sa.Column("filmcalc_version", sa.String(40), nullable=False),
        sa.Column("settings", sa.Text, nullable=False),
        sa.Column("summary", sa.Text, nullable=False),
        sa.Column("provenance", sa.Text, nullable=False),
    ]
    if version >= 2:
        run_columns.append(sa.Column("bytes_stored", sa.BigInteger, nullable=False, server_default="0"))
    runs = sa.Table("runs", meta, *run_columns)
    tags = sa.Table("run_tags", meta,
                    sa.Column("run_id", sa.String(40), sa.ForeignKey("runs.id", ondelete="CASCADE"),
                              primary_key=True),
                    sa.Column("tag", sa.String(MAX_TAG_CHARS), primary_key=True))
    sa.Table("run_files", meta,
                     sa.Column("run_id", sa.String(40), sa.ForeignKey("runs.id", ondelete="CASCADE"),
                               primary_key=True),
                     sa.Column("role", sa.String(8), primary_key=True),
                     sa.Column("name", sa.String(MAX_NAME_CHARS), primary_key=True),
                     sa.Column("sha256", sa.String(64), nullable=False),
                     sa.Column("size", sa.BigInteger, nullable=False),
                     sa.Column("media_type", sa.String(100), nullable=False),
                     sa.Index("ix_run_files_sha256", "sha256"))
    sa.Table("schema_version", meta,
             sa.Column("version", sa.Integer, primary_key=True, autoincrement=False),
             sa.Column("applied_utc", sa.String(27), nullable=False),
             sa.Column("description", sa.String(200), nullable=False))
    sa.Table("store", meta,
             sa.Column("id", sa.Integer, primary_key=True, autoincrement=False),
             sa.Column("uuid", sa.String(36), nullable=False),
             sa.Column("created_utc", sa.String(27), nullable=False))
    if version >= 2:
        sa.Index("ix_runs_sample_created", runs.c.sample, runs.c.created_utc)
        sa.Index("ix_runs_created", runs.c.created_utc)
        sa.Index("ix_run_tags_tag", tags.c.tag)
    return meta


_TABLES = _schema(SCHEMA_VERSION).tables
RUNS, TAGS, FILES = _TABLES["runs"], _TABLES["run_tags"], _TABLES["run_files"]
VERSIONS, STORE = _TABLES["schema_version"], _TABLES["store"]


def _create_v1(conn):
    """The first schema, as filmcalc 0.1 wrote it (kept for new stores and for the migration test)."""
    import uuid

    _schema(1).create_all(conn)
    conn.execute(STORE.insert().values(id=1, uuid=str(uuid.uuid4()), created_utc=_now_utc()))
    conn.execute(VERSIONS.insert().values(version=1, applied_utc=_now_utc(), description="first schema"))


def _migrate_to_2(conn):
    """Version 2: ``runs.bytes_stored`` (filled in from ``run_files``) and indexes for history and filters."""
    new = _schema(2)
    runs = new.tables["runs"]
    column = sa.schema.CreateColumn(runs.c.bytes_stored).compile(dialect=conn.dialect)
    table = conn.dialect.identifier_preparer.format_table(runs)
    conn.exec_driver_sql(f"ALTER TABLE {table} ADD COLUMN {column}")
    total = (sa.select(sa.func.coalesce(sa.func.sum(FILES.c.size), 0)).where(FILES.c.run_id == RUNS.c.id)
             .scalar_subquery())
    conn.execute(RUNS.update().values(bytes_stored=total))
    for index in list(runs.indexes) + list(new.tables["run_tags"].indexes):
        index.create(conn)


MIGRATIONS = [(2, "bytes_stored per run; indexes for history and filters", _migrate_to_2)]


# ----------------------------------------------------------------------------------------------
# Records
# ----------------------------------------------------------------------------------------------

@dataclasses.dataclass(frozen=True)
class StoredFile:
    """One file of a run.

    Attributes
    ----------
    role : {'input', 'output'}
    name : str
        Logical name (see :func:`validate_name`).
    sha256 : str
        Hex digest of the bytes.
    size : int
        Bytes.
    media_type : str
    """

    role: str
    name: str
    sha256: str
    size: int
    media_type: str

    def to_dict(self):
        return dataclasses.asdict(self)


@dataclasses.dataclass
class RunInfo:
    """A run as listed: what filters and tables need (no settings, provenance or files).

    Attributes
    ----------
    id, kind, sample, note, saved_by : str
    tags : list of str
    created_utc : str
        ``YYYY-MM-DDTHH:MM:SS.ffffffZ`` (UTC; sorts as text).
    filmcalc_version : str
    summary_json : str
        The summary numbers as stored (JSON; NaN stored as null).
    bytes_stored : int
        Total size of the run's files, bytes (shared files counted in every run).
    summary : dict
        ``summary_json`` parsed, on first use (listing 10,000 runs then costs no JSON parsing).
    """

    id: str
    kind: str
    sample: str
    tags: list
    note: str
    saved_by: str
    created_utc: str
    filmcalc_version: str
    summary_json: str = dataclasses.field(repr=False)
    bytes_stored: int

    @functools.cached_property
    def summary(self):
        return json.loads(self.summary_json)

    @property
    def created(self):
        """The saving time as an aware :class:`datetime.datetime` (UTC)."""
        return _dt.datetime.strptime(self.created_utc, _TIME_FORMAT).replace(tzinfo=_dt.UTC)

    def to_dict(self):
        """JSON-ready: every field, with ``summary`` parsed in place of ``summary_json``."""
        out = {}
        for field in dataclasses.fields(self):
            if field.name == "summary_json":
                out["summary"] = copy.deepcopy(self.summary)
            elif field.name == "files":
                out["files"] = [f.to_dict() for f in self.files]
            else:
                out[field.name] = copy.deepcopy(getattr(self, field.name))
        return out


@dataclasses.dataclass
class Run(RunInfo):
    """A run with everything: settings, provenance and its files.

    Attributes
    ----------
    settings, provenance : dict
    files : list of StoredFile
    """

    settings: dict = dataclasses.field(default_factory=dict)
    provenance: dict = dataclasses.field(default_factory=dict)
    files: list = dataclasses.field(default_factory=list)

    @property
    def inputs(self):
        """{name: StoredFile} of the inputs."""
        return {f.name: f for f in self.files if f.role == "input"}

    @property
    def outputs(self):
        """{name: StoredFile} of the outputs."""
        return {f.name: f for f in self.files if f.role == "output"}

    def record(self):
        """The run without its file list, JSON-ready (as in an export's manifest)."""
        out = self.to_dict()
        out.pop("files")
        out.pop("bytes_stored")
        return out


@dataclasses.dataclass
class CheckReport:
    """What :meth:`RunStore.check` found.

    Attributes
    ----------
    runs, files, bytes : int
        Runs in the database; stored files on disk and their total size.
    orphans : list of dict
        Stored files no run uses (``sha256``, ``size``): left by an interrupted save or delete.
    missing : list of dict
        Files a run needs that are not on disk (``run_id``, ``role``, ``name``, ``sha256``).
    corrupt : list of dict
        Stored files whose size or SHA-256 no longer match (``sha256``, ``problem``, ``run_ids``).
    temporary : list of dict
        Files in ``files/tmp`` (``name``, ``age_s``, ``stale``: older than an hour, so not a save in progress).
    unexpected : list of str
        Other files under ``files/`` (relative paths), left alone.
    deleted : list of str
        What ``delete_orphans`` removed (relative paths).
    hashes_verified : bool
    """

    runs: int = 0
    files: int = 0
    bytes: int = 0
    orphans: list = dataclasses.field(default_factory=list)
    missing: list = dataclasses.field(default_factory=list)
    corrupt: list = dataclasses.field(default_factory=list)
    temporary: list = dataclasses.field(default_factory=list)
    unexpected: list = dataclasses.field(default_factory=list)
    deleted: list = dataclasses.field(default_factory=list)
    hashes_verified: bool = True

    @property
    def ok(self):
        """No orphan, missing, corrupt or stale temporary file (files already deleted do not count)."""
        deleted = set(self.deleted)
        orphans = [o for o in self.orphans if f"files/{o['sha256'][:2]}/{o['sha256']}" not in deleted]
        stale = [t for t in self.temporary if t["stale"] and f"files/tmp/{t['name']}" not in deleted]
        return not (orphans or self.missing or self.corrupt or stale)

    def to_dict(self):
        return {**dataclasses.asdict(self), "ok": self.ok}


# ----------------------------------------------------------------------------------------------
# Writing files
# ----------------------------------------------------------------------------------------------

@dataclasses.dataclass
class _Staged:
    role: str
    name: str
    path: Path           # the temporary file
    sha256: str
    size: int

    def stored(self):
        return StoredFile(self.role, self.name, self.sha256, self.size, _media_type(self.name))


class _HashingWriter:
    """A write-only file wrapper that hashes and counts what passes through."""

    def __init__(self, handle):
        self.handle, self.digest, self.size = handle, hashlib.sha256(), 0

    def write(self, data):
        data = memoryview(data).cast("B")
        self.digest.update(data)
        self.size += len(data)
        return self.handle.write(data)

    def flush(self):
        self.handle.flush()


def _copy_hashing(source, writer, limit=None, what=""):
    while True:
        block = source.read(1 << 20)
        if not block:
            return
        writer.write(block)
        if limit is not None and writer.size > limit:
            raise FilmcalcError(f"{what} holds more bytes than it declares; refused.")


def _hash_file(path):
    digest, size = hashlib.sha256(), 0
    with open(path, "rb") as handle:
        for block in iter(lambda: handle.read(1 << 20), b""):
            digest.update(block)
            size += len(block)
    return digest.hexdigest(), size


def _zip_folder(folder, handle):
    """A deterministic zip of a folder (sorted names, fixed times, no compression: cube chunks are compressed)."""
    folder = Path(folder)
    with zipfile.ZipFile(handle, "w", zipfile.ZIP_STORED, allowZip64=True) as zf:
        for path in sorted(folder.rglob("*")):
            if path.is_file():
                info = zipfile.ZipInfo(path.relative_to(folder).as_posix(), date_time=(1980, 1, 1, 0, 0, 0))
                info.external_attr = 0o644 << 16
                with open(path, "rb") as source, zf.open(info, "w", force_zip64=True) as target:
                    shutil.copyfileobj(source, target, 1 << 20)


def _fsync_dir(path):
    if os.name == "nt":
        return
    try:
        fd = os.open(path, os.O_RDONLY)
    except OSError:
        return
    try:
        os.fsync(fd)
    except OSError:
        pass
    finally:
        os.close(fd)


# ----------------------------------------------------------------------------------------------
# Reading files safely
# ----------------------------------------------------------------------------------------------

def _read_npy(path, name, mmap=False):
    """Load an .npy file after checking its header: no object arrays, and the size the header promises."""
    with open(path, "rb") as handle:
        try:
            version = np.lib.format.read_magic(handle)
            if version == (1, 0):
                shape, _, dtype = np.lib.format.read_array_header_1_0(handle)
            elif version in ((2, 0), (3, 0)):
                shape, _, dtype = np.lib.format.read_array_header_2_0(handle)
            else:
                raise ValueError(f"unknown .npy version {version}")
        except ValueError as exc:
            raise FilmcalcError(f"The stored array {name!r} is not a valid .npy file ({exc}).") from None
        offset = handle.tell()
    if dtype.hasobject:
        raise FilmcalcError(f"The stored array {name!r} holds Python objects; filmcalc never unpickles them.")
    expected = int(np.prod(shape, dtype=np.int64)) * dtype.itemsize
    if Path(path).stat().st_size - offset != expected:
        raise FilmcalcError(f"The stored array {name!r} is truncated or padded: its header promises {expected} "
                            "bytes of data. Run `filmcalc runs check`.")
    return np.load(path, mmap_mode="r" if mmap else None, allow_pickle=False)


_CUBE_MEMBER = re.compile(r"(?:[A-Za-z0-9_]+/)?zarr\.json|[A-Za-z0-9_]+/c(?:/\d{1,9}){1,8}")
_CUBE_TYPES = {"float32", "float64", "uint8", "uint16", "uint32", "int8", "int16", "int32", "int64", "bool"}
_CUBE_CODECS = {"bytes", "zstd", "gzip", "blosc", "crc32c", "transpose"}


def _check_zip_sizes(infos, what, max_member, max_total):
    total = 0
    for info in infos:
        if info.flag_bits & 0x1:
            raise FilmcalcError(f"{what}: {info.filename!r} is encrypted; refused.")
        if info.compress_type not in (zipfile.ZIP_STORED, zipfile.ZIP_DEFLATED):
            raise FilmcalcError(f"{what}: {info.filename!r} uses a compression filmcalc does not write; refused.")
        if info.file_size > max_member:
            raise FilmcalcError(f"{what}: {info.filename!r} declares {info.file_size:,} bytes, over the limit of "
                                f"{max_member:,}; refused.")
        if info.file_size > 0 and info.file_size / max(info.compress_size, 1) > MAX_COMPRESSION_RATIO:
            raise FilmcalcError(f"{what}: {info.filename!r} declares a compression ratio of "
                                f"{info.file_size / max(info.compress_size, 1):,.0f}:1, impossible for the "
                                "zip files filmcalc writes (a zip bomb?); refused.")
        total += info.file_size
    if total > max_total:
        raise FilmcalcError(f"{what} unpacks to {total:,} bytes, over the limit of {max_total:,}; refused.")
    return total


def _check_cube_zip(path, what="the thickness cube"):
    """Refuse a cube zip whose names, sizes, types or codecs filmcalc would not write."""
    try:
        with zipfile.ZipFile(path) as zf:
            infos = zf.infolist()
            _check_zip_sizes(infos, what, MAX_IMPORT_MEMBER_BYTES, MAX_IMPORT_TOTAL_BYTES)
            for info in infos:
                if not _CUBE_MEMBER.fullmatch(info.filename):
                    raise FilmcalcError(f"{what}: unexpected member {info.filename[:80]!r}; refused.")
                if info.filename.endswith("zarr.json"):
                    if info.file_size > 1 << 20:
                        raise FilmcalcError(f"{what}: metadata {info.filename!r} is too large; refused.")
                    meta = json.loads(zf.read(info))
                    if meta.get("zarr_format") != 3 or meta.get("node_type") not in ("group", "array"):
                        raise FilmcalcError(f"{what}: {info.filename!r} is not Zarr v3 metadata; refused.")
                    if meta["node_type"] == "array":
                        codecs = {c.get("name") for c in meta.get("codecs", []) if isinstance(c, dict)}
                        if meta.get("data_type") not in _CUBE_TYPES or not codecs <= _CUBE_CODECS \
                                or meta.get("storage_transformers"):
                            raise FilmcalcError(f"{what}: {info.filename!r} declares a data type or codec "
                                                "filmcalc does not write; refused.")
    except (zipfile.BadZipFile, ValueError, KeyError, AttributeError) as exc:
        raise FilmcalcError(f"{what} is not a readable cube zip ({exc}).") from None


# ----------------------------------------------------------------------------------------------
# The store
# ----------------------------------------------------------------------------------------------

_KEEP = object()


class RunStore:
    """Saved runs: a database plus a folder of content-addressed files.

    Parameters
    ----------
    data_dir : str or path-like, optional
        The data folder (files, and the SQLite database unless ``database_url``
        is given). Default: ``$FILMCALC_DATA``, else :func:`default_data_dir`.
    database_url : str, optional
        A SQLAlchemy URL, e.g. ``postgresql+psycopg://user@host/filmcalc``.
        Default: ``$FILMCALC_DATABASE_URL``, else SQLite at ``DATA/runs.sqlite``.
        With a server database, every user must see the same data folder
        (a shared file system), since the files live there.

    Notes
    -----
    Nothing is created until the first save (reading an absent store gives no
    runs). One object may be shared by threads (the engine pools
    connections); each process opens its own.
    """

    def __init__(self, data_dir=None, database_url=None):
        self.data_dir = resolve_data_dir(data_dir).resolve()
        self.files_dir = self.data_dir / "files"
        self._tmp_dir = self.files_dir / "tmp"
        url = database_url or os.environ.get(DATABASE_URL_ENV) or None
        self._sqlite_path = None if url else self.data_dir / DATABASE_FILE
        if url is None:
            url = sa.engine.URL.create("sqlite", database=str(self._sqlite_path))
        try:
            self._url = sa.engine.make_url(url)
            self._engine = sa.create_engine(self._url)
        except (sa.exc.ArgumentError, ImportError, ModuleNotFoundError) as exc:
            raise FilmcalcError(f"Cannot use the database URL {str(url)[:80]!r}: {exc}. Write it like "
                                "postgresql+psycopg://user@host/dbname (with psycopg installed).") from None
        if self._engine.dialect.name == "sqlite":
            sa.event.listen(self._engine, "connect", _sqlite_connect)
            sa.event.listen(self._engine, "begin", _sqlite_begin)
        self._ready = False

    # -- context --------------------------------------------------------------------------------

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()

    def close(self):
        """Release the database connections."""
        self._engine.dispose()

    def __repr__(self):
        return f"RunStore({self.describe()!r})"

    def describe(self):
        """Where the store is, for messages (passwords hidden)."""
        if self._sqlite_path is not None:
            return f"{self._sqlite_path} (files in {self.files_dir})"
        return f"{self._url.render_as_string(hide_password=True)} (files in {self.files_dir})"

    @contextlib.contextmanager
    def _disk(self, doing):
        """Turn an operating-system error (no such folder, no permission, disk full) into a FilmcalcError."""
        try:
            yield
        except FilmcalcError:
            raise
        except OSError as exc:
            raise FilmcalcError(f"Cannot {doing} in {self.data_dir}: {exc.strerror or exc}"
                                f"{f' ({exc.filename})' if exc.filename else ''}. Check that the folder is "
                                "writable and has room, or choose another with --data-dir or FILMCALC_DATA.") from None

    # -- connections and schema -----------------------------------------------------------------

    @contextlib.contextmanager
    def _connection(self, write):
        try:
            with self._engine.connect() as conn:
                if write:
                    conn.execution_options(filmcalc_write=True)
                with conn.begin():
                    if write:
                        # The store's write lock: BEGIN IMMEDIATE already holds it on SQLite (FOR UPDATE is not
                        # rendered there); on a server database, the row lock serialises writers.
                        conn.execute(sa.select(STORE.c.id).where(STORE.c.id == 1).with_for_update())
                    yield conn
        except sa.exc.OperationalError as exc:
            raise FilmcalcError(f"The run store at {self.describe()} cannot be used: {_db_message(exc)}. Check "
                                "--data-dir / --database-url and that the folder is writable.") from None

    def _reader(self):
        return self._connection(write=False)

    def _writer(self):
        self._prepare(create=True)
        return self._connection(write=True)

    def schema_version(self):
        """The store's schema version, or None when nothing has been saved yet."""
        if self._sqlite_path is not None and not self._sqlite_path.exists():
            return None
        with self._reader() as conn:
            return _read_version(conn)

    def _prepare(self, create):
        """Make sure the schema exists and is current; False when it does not exist and ``create`` is False."""
        if self._ready:
            return True
        if self._sqlite_path is not None and not self._sqlite_path.exists() and not create:
            return False
        for attempt in range(6):
            try:
                if self._sqlite_path is None or self._sqlite_path.exists():
                    with self._engine.connect() as conn:
                        version = _read_version(conn)
                    if version == SCHEMA_VERSION:
                        self._ready = True
                        return True
                    self._refuse_newer(version)
                    if version is None and not create:
                        return False
                else:
                    self.data_dir.mkdir(parents=True, exist_ok=True)
                self._upgrade()
                self._ready = True
                return True
            except FilmcalcError:
                raise
            except sa.exc.DBAPIError as exc:  # another process creating or upgrading the store at once
                if attempt == 5:
                    raise FilmcalcError(f"The run store at {self.describe()} cannot be opened: "
                                        f"{_db_message(exc)}.") from None
                time.sleep(0.05 * (attempt + 1) * (1 + random.random()))
            except OSError as exc:
                raise FilmcalcError(f"Cannot create the data folder {self.data_dir}: {exc.strerror or exc}. "
                                    "Choose another with --data-dir or FILMCALC_DATA.") from None
        return False  # not reached

    def _refuse_newer(self, version):
        if version is not None and version > SCHEMA_VERSION:
            raise FilmcalcError(f"The run store at {self.describe()} has schema version {version}, newer than "
                                f"this filmcalc {__version__} can read (version {SCHEMA_VERSION}). Upgrade "
                                "filmcalc, or choose another store with --data-dir.")

    def _upgrade(self):
        with self._engine.connect() as conn:
            conn.execution_options(filmcalc_write=True)
            with conn.begin():
                version = _read_version(conn)
                self._refuse_newer(version)
                if version is None:
                    _create_v1(conn)
                    version = 1
                for target, description, step in MIGRATIONS:
                    if target > version:
                        step(conn)
                        conn.execute(VERSIONS.insert().values(version=target, applied_utc=_now_utc(),
                                                              description=description))
                        version = target

    # -- saving ---------------------------------------------------------------------------------

    def save(self, kind, *, inputs=None, outputs=None, settings=None, summary=None, provenance=None, sample="",
             tags=(), note="", saved_by=""):
        """Save a run and return it.

        Parameters
        ----------
        kind : str
            One of :data:`KINDS`.
        inputs, outputs : dict of {name: value}, optional
            ``value`` is bytes, text (str, stored as UTF-8), a numpy array
            (stored as ``.npy``; the name must end in ``.npy``), a path to a
            file (copied), or a path to a folder (stored as a zip of it; the
            name must end in ``.zip``). Names follow :func:`validate_name`.
        settings : dict, optional
            Every setting that defines the result (JSON-ready; numpy values
            are converted, NaN becomes null).
        summary : dict, optional
            The summary numbers (at most 64 KiB of JSON: listing stays fast).
            Nested dicts are reached by dotted keys in :func:`history_table`.
        provenance : dict, optional
            The analysis's own record; the store adds ``filmcalc_version``,
            ``saved_utc`` and the SHA-256 of every input and output.
        sample, note, saved_by : str
        tags : iterable of str

        Returns
        -------
        Run

        Raises
        ------
        FilmcalcError
            An unknown kind, a bad name or text, an unreadable input file, a
            store that cannot be written.
        """
        if kind not in KINDS:
            raise FilmcalcError(f"Unknown kind of run {kind!r}; one of: {', '.join(KINDS)}.")
        record = {"kind": kind, "sample": _clean_text(sample, "sample"), "note": _clean_text(note, "note"),
                  "saved_by": _clean_text(saved_by, "saved_by"), "filmcalc_version": __version__,
                  "settings": _to_json(settings, "settings", MAX_JSON_BYTES),
                  "summary": _to_json(summary, "summary", MAX_SUMMARY_BYTES)}
        tags = _clean_tags(tags)
        items = [(role, validate_name(name), value) for role, group in (("input", inputs), ("output", outputs))
                 for name, value in (group or {}).items()]
        staged = []
        try:
            with self._disk("save the run's files"):
                for role, name, value in items:
                    staged.append(self._stage(role, name, value))
            record["created_utc"] = _now_utc()
            extra = {"filmcalc_version": __version__, "saved_utc": record["created_utc"],
                     "input_sha256": {s.name: s.sha256 for s in staged if s.role == "input"},
                     "output_sha256": {s.name: s.sha256 for s in staged if s.role == "output"}}
            record["provenance"] = _to_json({**(provenance or {}), **extra}, "provenance", MAX_JSON_BYTES)
            with self._disk("store the run's files"):
                return self._commit(record, tags, staged, new_id=True)
        finally:
            for s in staged:
                s.path.unlink(missing_ok=True)

    def _stage(self, role, name, value):
        """Write one file to files/tmp, hashing it on the way."""
        self._tmp_dir.mkdir(parents=True, exist_ok=True)
        fd, tmp = tempfile.mkstemp(dir=self._tmp_dir, suffix=".part")
        tmp = Path(tmp)
        try:
            with os.fdopen(fd, "wb") as handle:
                writer = _HashingWriter(handle)
                if isinstance(value, np.ndarray):
                    if not name.endswith(".npy"):
                        raise FilmcalcError(f"{name!r}: an array is stored as .npy; end its name in .npy.")
                    if value.dtype.hasobject:
                        raise FilmcalcError(f"{name!r}: arrays of Python objects cannot be stored.")
                    np.lib.format.write_array(writer, np.ascontiguousarray(value), allow_pickle=False)
                elif isinstance(value, (bytes, bytearray, memoryview)):
                    writer.write(value)
                elif isinstance(value, str):
                    writer.write(value.encode("utf-8"))
                elif isinstance(value, os.PathLike):
                    source = Path(value)
                    if source.is_dir():
                        if not name.endswith(".zip"):
                            raise FilmcalcError(f"{name!r}: a folder is stored as a zip; end its name in .zip.")
                        _zip_folder(source, handle)
                        writer = None
                    else:
                        try:
                            with open(source, "rb") as src:
                                _copy_hashing(src, writer)
                        except OSError as exc:
                            raise FilmcalcError(f"Cannot read {str(source)!r} to save it: "
                                                f"{exc.strerror or exc}.") from None
                else:
                    raise TypeError(f"{name}: cannot store a {type(value).__name__}")
                handle.flush()
                os.fsync(handle.fileno())
            if writer is None:
                sha, size = _hash_file(tmp)
            else:
                sha, size = writer.digest.hexdigest(), writer.size
            return _Staged(role, name, tmp, sha, size)
        except BaseException:
            tmp.unlink(missing_ok=True)
            raise

    def blob_path(self, sha256):
        """Where the file with this SHA-256 is stored (built from the hash alone, never from a name)."""
        if not isinstance(sha256, str) or not _SHA256.fullmatch(sha256):
            raise FilmcalcError(f"{str(sha256)[:70]!r} is not a SHA-256 hex digest.")
        return self.files_dir / sha256[:2] / sha256

    def _place(self, staged):
        """Move a staged file into the content store; False when identical content was already there."""
        target = self.blob_path(staged.sha256)
        try:
            if target.stat().st_size == staged.size:
                staged.path.unlink(missing_ok=True)
                return False
        except FileNotFoundError:
            pass
        target.parent.mkdir(parents=True, exist_ok=True)
        if os.name != "nt":
            os.chmod(staged.path, 0o444)  # stored files are never written again
        os.replace(staged.path, target)   # also replaces a damaged copy of the same content
        _fsync_dir(target.parent)
        return True

    def _commit(self, record, tags, staged, new_id):
        """Place the files and insert the run's rows in one locked transaction; return the Run."""
        with self._writer() as conn:
            if new_id:
                record["id"] = _new_run_id()
                while conn.execute(sa.select(RUNS.c.id).where(RUNS.c.id == record["id"])).first():
                    record["id"] = _new_run_id()
            elif conn.execute(sa.select(RUNS.c.id).where(RUNS.c.id == record["id"])).first():
                raise FilmcalcError(f"This store already holds a run {record['id']}; import with --new-id "
                                    "(new_id=True) to keep both.")
            placed = []
            try:
                for s in staged:
                    if self._place(s):
                        placed.append(s.sha256)
                files = sorted((s.stored() for s in staged), key=lambda f: (f.role, f.name))
                record["bytes_stored"] = sum(f.size for f in files)
                self._insert_rows(conn, record, tags, files)
            except BaseException:
                for sha in placed:  # we hold the write lock: nobody else can have started using them
                    self.blob_path(sha).unlink(missing_ok=True)
                raise
        return Run(id=record["id"], kind=record["kind"], sample=record["sample"], tags=list(tags),
                   note=record["note"], saved_by=record["saved_by"], created_utc=record["created_utc"],
                   filmcalc_version=record["filmcalc_version"], summary_json=record["summary"],
                   bytes_stored=record["bytes_stored"], settings=json.loads(record["settings"]),
                   provenance=json.loads(record["provenance"]), files=files)

    def _insert_rows(self, conn, record, tags, files):
        """Insert the run, its tags and its files (inside the caller's transaction)."""
        conn.execute(RUNS.insert().values(**{c.name: record[c.name] for c in RUNS.columns}))
        if tags:
            conn.execute(TAGS.insert(), [{"run_id": record["id"], "tag": t} for t in tags])
        if files:
            conn.execute(FILES.insert(), [{"run_id": record["id"], **f.to_dict()} for f in files])

    # -- reading --------------------------------------------------------------------------------

    def get(self, run_id):
        """The run with this id, with settings, provenance and files.

        Raises
        ------
        FilmcalcError
            No such run.
        """
        _check_run_id(run_id)
        if self._prepare(create=False):
            with self._reader() as conn:
                run = self._get(conn, run_id)
            if run is not None:
                return run
        raise FilmcalcError(f"No run {run_id!r} in the store at {self.describe()}; `filmcalc runs list` shows the "
                            "saved runs.")

    def _get(self, conn, run_id):
        row = conn.execute(sa.select(RUNS).where(RUNS.c.id == run_id)).mappings().first()
        if row is None:
            return None
        tags = list(conn.scalars(sa.select(TAGS.c.tag).where(TAGS.c.run_id == run_id).order_by(TAGS.c.tag)))
        files = [StoredFile(r.role, r.name, r.sha256, int(r.size), r.media_type) for r in conn.execute(
            sa.select(FILES).where(FILES.c.run_id == run_id).order_by(FILES.c.role, FILES.c.name))]
        return Run(id=row["id"], kind=row["kind"], sample=row["sample"], tags=tags, note=row["note"],
                   saved_by=row["saved_by"], created_utc=row["created_utc"],
                   filmcalc_version=row["filmcalc_version"], summary_json=row["summary"],
                   bytes_stored=int(row["bytes_stored"]), settings=json.loads(row["settings"]),
                   provenance=json.loads(row["provenance"]), files=files)

    def exists(self, run_id):
        """Whether a run with this id is stored."""
        _check_run_id(run_id)
        if not self._prepare(create=False):
            return False
        with self._reader() as conn:
            return conn.execute(sa.select(RUNS.c.id).where(RUNS.c.id == run_id)).first() is not None

    def _conditions(self, sample=None, tags=None, kind=None, saved_by=None, since=None, until=None, text=None):
        conditions = []
        if sample is not None:
            conditions.append(RUNS.c.sample == str(sample).strip())
        for tag in _clean_tags(tags):
            conditions.append(RUNS.c.id.in_(sa.select(TAGS.c.run_id).where(TAGS.c.tag == tag)))
        if kind:
            kinds = [kind] if isinstance(kind, str) else list(kind)
            unknown = [k for k in kinds if k not in KINDS]
            if unknown:
                raise FilmcalcError(f"Unknown kind {unknown[0]!r}; one of: {', '.join(KINDS)}.")
            conditions.append(RUNS.c.kind.in_(kinds))
        if saved_by is not None:
            conditions.append(RUNS.c.saved_by == str(saved_by).strip())
        if since is not None:
            conditions.append(RUNS.c.created_utc >= _as_utc_text(since, "since"))
        if until is not None:
            conditions.append(RUNS.c.created_utc < _as_utc_text(until, "until"))
        if text:
            needle = str(text).strip()
            conditions.append(sa.or_(RUNS.c.sample.icontains(needle, autoescape=True),
                                     RUNS.c.note.icontains(needle, autoescape=True),
                                     RUNS.c.id.icontains(needle, autoescape=True)))
        return conditions

    def list_runs(self, *, sample=None, tags=None, kind=None, saved_by=None, since=None, until=None, text=None,
                  newest_first=True, limit=None, offset=0):
        """Runs matching every filter given, newest first (or oldest first).

        Parameters
        ----------
        sample : str, optional
            Exact sample name.
        tags : str or list of str, optional
            Runs carrying every one of these tags.
        kind : str or list of str, optional
        saved_by : str, optional
        since, until : str, datetime or date, optional
            Saved at or after ``since`` and before ``until`` (UTC; ISO text like ``2026-12-01``).
        text : str, optional
            Case-insensitive substring of the sample, note or id.
        newest_first : bool
        limit, offset : int, optional
            A page of the results.

        Returns
        -------
        list of RunInfo
        """
        conditions = self._conditions(sample, tags, kind, saved_by, since, until, text)
        if not self._prepare(create=False):
            return []
        order = (RUNS.c.created_utc.desc(), RUNS.c.id.desc()) if newest_first else (RUNS.c.created_utc,
                                                                                    RUNS.c.id)
        query = sa.select(RUNS.c.id, RUNS.c.kind, RUNS.c.sample, RUNS.c.note, RUNS.c.saved_by, RUNS.c.created_utc,
                          RUNS.c.filmcalc_version, RUNS.c.summary, RUNS.c.bytes_stored).where(*conditions)
        query = query.order_by(*order).offset(offset or None).limit(limit)
        tag_query = sa.select(TAGS.c.run_id, TAGS.c.tag).order_by(TAGS.c.run_id, TAGS.c.tag)
        with self._reader() as conn:  # one read transaction: the runs and their tags from the same snapshot
            rows = conn.execute(query).all()
            if len(rows) <= 500:  # a page: the tags of these runs only
                tag_query = tag_query.where(TAGS.c.run_id.in_([r[0] for r in rows]))
            elif conditions:
                tag_query = tag_query.where(TAGS.c.run_id.in_(sa.select(RUNS.c.id).where(*conditions)))
            tags_of = {}
            for run_id, tag in conn.execute(tag_query) if rows else ():
                tags_of.setdefault(run_id, []).append(tag)
        return [RunInfo(r[0], r[1], r[2], tags_of.get(r[0], []), r[3], r[4], r[5], r[6], r[7], int(r[8]))
                for r in rows]

    def count_runs(self, **filters):
        """How many runs match the filters of :meth:`list_runs` (for paging)."""
        conditions = self._conditions(**filters)
        if not self._prepare(create=False):
            return 0
        with self._reader() as conn:
            return int(conn.scalar(sa.select(sa.func.count()).select_from(RUNS).where(*conditions)))

    def facets(self):
        """The values the filters can take: ``{"samples", "tags", "kinds", "saved_by"}``, each sorted."""
        empty = {"samples": [], "tags": [], "kinds": [], "saved_by": []}
        if not self._prepare(create=False):
            return empty
        with self._reader() as conn:
            def distinct(column):
                return [v for v in conn.scalars(sa.select(column).distinct().order_by(column)) if v]
            return {"samples": distinct(RUNS.c.sample), "tags": distinct(TAGS.c.tag), "kinds": distinct(RUNS.c.kind),
                    "saved_by": distinct(RUNS.c.saved_by)}

    def update(self, run_id, *, sample=_KEEP, note=_KEEP, tags=_KEEP, saved_by=_KEEP):
        """Change a run's sample, note, tags or saved-by name (its results never change). Returns the Run."""
        _check_run_id(run_id)
        values = {}
        if sample is not _KEEP:
            values["sample"] = _clean_text(sample, "sample")
        if note is not _KEEP:
            values["note"] = _clean_text(note, "note")
        if saved_by is not _KEEP:
            values["saved_by"] = _clean_text(saved_by, "saved_by")
        new_tags = None if tags is _KEEP else _clean_tags(tags)
        self.get(run_id)
        with self._writer() as conn:
            if conn.execute(sa.select(RUNS.c.id).where(RUNS.c.id == run_id)).first() is None:
                raise FilmcalcError(f"Run {run_id!r} was deleted meanwhile.")
            if values:
                conn.execute(RUNS.update().where(RUNS.c.id == run_id).values(**values))
            if new_tags is not None:
                conn.execute(TAGS.delete().where(TAGS.c.run_id == run_id))
                if new_tags:
                    conn.execute(TAGS.insert(), [{"run_id": run_id, "tag": t} for t in new_tags])
        return self.get(run_id)

    def _file(self, run, name, role):
        if isinstance(run, str):
            run = self.get(run)
        wanted = [f for f in run.files if f.name == name and (role is None or f.role == role)]
        if not wanted:
            have = ", ".join(f"{f.role} {f.name}" for f in run.files) or "no files"
            raise FilmcalcError(f"Run {run.id} has no {role or ''} file {name!r} (it has {have}).")
        stored = wanted[0]
        path = self.blob_path(stored.sha256)
        if not path.is_file():
            raise FilmcalcError(f"The file {name!r} of run {run.id} is missing from {self.files_dir}; run "
                                "`filmcalc runs check`.")
        return stored, path

    def file_path(self, run, name, role="output"):
        """The stored file's path, for reading only (``run`` is a Run or an id)."""
        return self._file(run, name, role)[1]

    def read_bytes(self, run, name, role="output"):
        """A stored file's bytes (``run`` is a Run or an id)."""
        return self._file(run, name, role)[1].read_bytes()

    def load_array(self, run, name, role="output", mmap=False):
        """A stored ``.npy`` array, read without unpickling (``mmap=True``: a read-only memory map)."""
        stored, path = self._file(run, name, role)
        return _read_npy(path, stored.name, mmap=mmap)

    def open_cube(self, run, name="cube.zarr.zip"):
        """A sequence run's thickness cube, read in place: ``({name: dask array}, attributes)``."""
        import dask.array as da
        import zarr

        _, path = self._file(run, name, "output")
        _check_cube_zip(path)
        store = zarr.storage.ZipStore(str(path), mode="r")
        group = zarr.open_group(store=store, mode="r", zarr_format=3)
        arrays = {key: da.from_zarr(group[key]) for key in group.array_keys()}
        return arrays, dict(group.attrs)

    # -- deleting -------------------------------------------------------------------------------

    def delete(self, run_id):
        """Delete a run; its files go too unless another run uses them. Returns the deleted Run."""
        _check_run_id(run_id)
        run = self.get(run_id)
        with self._writer() as conn:
            if conn.execute(sa.select(RUNS.c.id).where(RUNS.c.id == run_id)).first() is None:
                raise FilmcalcError(f"Run {run_id!r} was deleted meanwhile.")
            conn.execute(FILES.delete().where(FILES.c.run_id == run_id))
            conn.execute(TAGS.delete().where(TAGS.c.run_id == run_id))
            conn.execute(RUNS.delete().where(RUNS.c.id == run_id))
        with self._disk("remove the run's files"):
            self._remove_unused({f.sha256 for f in run.files})
        return run

    def _remove_unused(self, hashes):
        """Remove these stored files unless a run uses them (under the write lock)."""
        hashes = sorted(hashes)
        removed = []
        if not hashes:
            return removed
        with self._writer() as conn:
            used = set()
            for start in range(0, len(hashes), 500):
                chunk = hashes[start:start + 500]
                used.update(conn.scalars(sa.select(FILES.c.sha256).where(FILES.c.sha256.in_(chunk)).distinct()))
            for sha in hashes:
                if sha not in used:
                    path = self.blob_path(sha)
                    if path.exists():
                        path.unlink()
                        removed.append(f"files/{sha[:2]}/{sha}")
        return removed

    # -- integrity ------------------------------------------------------------------------------

    def check(self, delete_orphans=False, verify_hashes=True):
        """Compare the database with the files folder.

        Parameters
        ----------
        delete_orphans : bool
            Remove stored files no run uses, and temporary files older than an
            hour (younger ones may belong to a save in progress).
        verify_hashes : bool
            Re-hash every stored file (reads everything); otherwise sizes only.

        Returns
        -------
        CheckReport
        """
        report = CheckReport(hashes_verified=verify_hashes)
        expected = {}
        if self._prepare(create=False):
            with self._reader() as conn:
                report.runs = int(conn.scalar(sa.select(sa.func.count()).select_from(RUNS)))
                for r in conn.execute(sa.select(FILES.c.run_id, FILES.c.role, FILES.c.name, FILES.c.sha256,
                                                FILES.c.size)):
                    expected.setdefault(r.sha256, {"size": int(r.size), "uses": []})["uses"].append(
                        (r.run_id, r.role, r.name))
        on_disk = {}
        now = time.time()
        if self.files_dir.is_dir():
            for path in sorted(self.files_dir.rglob("*")):
                if not path.is_file():
                    continue
                relative = path.relative_to(self.files_dir).as_posix()
                parts = relative.split("/")
                if parts[0] == "tmp" and len(parts) == 2:
                    age = now - path.stat().st_mtime
                    report.temporary.append({"name": parts[1], "age_s": round(age, 1), "stale": age > TEMP_GRACE_S})
                elif len(parts) == 2 and _SHA256.fullmatch(parts[1]) and parts[0] == parts[1][:2]:
                    on_disk[parts[1]] = path
                else:
                    report.unexpected.append(f"files/{relative}")
        report.files = len(on_disk)
        for sha, path in on_disk.items():
            size = path.stat().st_size
            report.bytes += size
            if sha not in expected:
                report.orphans.append({"sha256": sha, "size": size})
                continue
            problem = None
            if size != expected[sha]["size"]:
                problem = f"size {size} bytes, expected {expected[sha]['size']}"
            elif verify_hashes and _hash_file(path)[0] != sha:
                problem = "content does not match its SHA-256"
            if problem:
                report.corrupt.append({"sha256": sha, "problem": problem,
                                       "run_ids": sorted({u[0] for u in expected[sha]["uses"]})})
        for sha, info in expected.items():
            if sha not in on_disk:
                for run_id, role, name in info["uses"]:
                    report.missing.append({"run_id": run_id, "role": role, "name": name, "sha256": sha})
        if delete_orphans:
            if report.orphans and self._prepare(create=False):
                report.deleted += self._remove_unused({o["sha256"] for o in report.orphans})
            elif report.orphans:  # no database at all: every stored file is an orphan
                for o in report.orphans:
                    self.blob_path(o["sha256"]).unlink(missing_ok=True)
                    report.deleted.append(f"files/{o['sha256'][:2]}/{o['sha256']}")
            for t in report.temporary:
                if t["stale"]:
                    (self._tmp_dir / t["name"]).unlink(missing_ok=True)
                    report.deleted.append(f"files/tmp/{t['name']}")
        return report

    # -- export and import ----------------------------------------------------------------------

    def export_zip(self, run_id, path):
        """Write one run to a zip: ``manifest.json``, ``inputs/NAME`` and ``outputs/NAME``.

        The manifest holds the run's record (settings, summary, provenance,
        tags, ...) and every file's role, name, SHA-256, size and media type.
        Each file's hash is checked before it is copied, so a damaged store is
        not exported silently. Files are deflated at level 1 (fast; float maps
        hardly compress further), already-compressed ones stored. The zip is
        written beside ``path`` and renamed into place. Returns the path.
        """
        run = self.get(run_id)
        path = Path(path)
        if path.suffix.lower() != ".zip":
            raise FilmcalcError(f"The export file must end in .zip (got {str(path)!r}).")
        if not path.parent.is_dir():
            raise FilmcalcError(f"The folder {str(path.parent)!r} does not exist.")
        manifest = {"format": "filmcalc run", "format_version": 1, "exported_utc": _now_utc(),
                    "exported_by_filmcalc": __version__, "run": run.record(),
                    "files": [f.to_dict() for f in run.files]}
        try:
            fd, tmp = tempfile.mkstemp(dir=path.parent, prefix=f".{path.stem}-", suffix=".part")
        except OSError as exc:
            raise FilmcalcError(f"Cannot write in {str(path.parent)!r}: {exc.strerror or exc}.") from None
        os.close(fd)
        try:
            with zipfile.ZipFile(tmp, "w", zipfile.ZIP_DEFLATED, allowZip64=True, compresslevel=1) as zf:
                zf.writestr("manifest.json", json.dumps(manifest, indent=1, ensure_ascii=False))
                for f in run.files:
                    _, blob = self._file(run, f.name, f.role)
                    if _hash_file(blob) != (f.sha256, f.size):
                        raise FilmcalcError(f"The stored file {f.name!r} of run {run.id} no longer matches its "
                                            "SHA-256; run `filmcalc runs check` before exporting.")
                    suffix = PurePosixPath(f.name).suffix.lower()
                    compression = zipfile.ZIP_STORED if suffix in _ALREADY_COMPRESSED else zipfile.ZIP_DEFLATED
                    zf.write(blob, f"{f.role}s/{f.name}", compress_type=compression, compresslevel=1)
            os.replace(tmp, path)
        except OSError as exc:
            Path(tmp).unlink(missing_ok=True)
            raise FilmcalcError(f"Cannot write {str(path)!r}: {exc.strerror or exc}.") from None
        except BaseException:
            Path(tmp).unlink(missing_ok=True)
            raise
        return path

    def import_zip(self, path, *, new_id=False, max_member_bytes=MAX_IMPORT_MEMBER_BYTES,
                   max_total_bytes=MAX_IMPORT_TOTAL_BYTES):
        """Import a run exported by :meth:`export_zip` and return it.

        Every member is checked before anything is stored: names (only
        ``manifest.json`` and the manifest's ``inputs/NAME`` and
        ``outputs/NAME``; no absolute paths, ``..``, backslashes or drive
        letters), declared sizes (per member and in total, and against the
        free disk space), compression (stored or deflate, with a possible
        ratio), then each file's size and SHA-256 as it is unpacked.

        Parameters
        ----------
        path : str or path-like
        new_id : bool
            The run keeps its id (so links to it keep working) unless this
            store already has a run with that id: then the import is refused,
            or, with ``new_id=True``, the run gets a new id.
        max_member_bytes, max_total_bytes : int
            Largest file, and largest total, accepted (bytes).

        Raises
        ------
        FilmcalcError
            What was wrong with the zip.
        """
        path = Path(path)
        what = path.name
        try:
            zf = zipfile.ZipFile(path)
        except FileNotFoundError:
            raise FilmcalcError(f"{str(path)!r} does not exist.") from None
        except (zipfile.BadZipFile, OSError) as exc:
            raise FilmcalcError(f"{what} is not a readable zip file ({exc}).") from None
        staged = []
        try:
            with zf:
                infos = zf.infolist()
                if len(infos) > MAX_IMPORT_MEMBERS:
                    raise FilmcalcError(f"{what} holds {len(infos):,} members, more than a run has; refused.")
                names = [i.filename for i in infos]
                for name in names:
                    _check_member_name(name, what)
                if len(set(names)) != len(names):
                    raise FilmcalcError(f"{what} names a member twice; refused.")
                total = _check_zip_sizes(infos, what, max_member_bytes, max_total_bytes)
                free = shutil.disk_usage(self.data_dir if self.data_dir.exists() else self.data_dir.parent
                                         if self.data_dir.parent.exists() else Path.cwd()).free
                if total > free:
                    raise FilmcalcError(f"{what} unpacks to {total:,} bytes but only {free:,} are free; refused.")
                if "manifest.json" not in names:
                    raise FilmcalcError(f"{what} has no manifest.json: it is not a filmcalc run export.")
                manifest_info = zf.getinfo("manifest.json")
                if manifest_info.file_size > MAX_JSON_BYTES * 3:
                    raise FilmcalcError(f"{what}: manifest.json is too large; refused.")
                try:
                    manifest = json.loads(zf.read(manifest_info).decode("utf-8"))
                except (ValueError, UnicodeDecodeError) as exc:
                    raise FilmcalcError(f"{what}: manifest.json is not valid JSON ({exc}).") from None
                record, tags, files = _parse_manifest(manifest, what)
                listed = {f"{f['role']}s/{f['name']}": f for f in files}
                members = set(names) - {"manifest.json"}
                if members != set(listed):
                    extra = sorted(members - set(listed))
                    lost = sorted(set(listed) - members)
                    raise FilmcalcError(f"{what}: the members do not match the manifest"
                                        + (f" (not listed: {extra[0]!r})" if extra else "")
                                        + (f" (missing: {lost[0]!r})" if lost else "") + "; refused.")
                for member, f in listed.items():
                    info = zf.getinfo(member)
                    if info.file_size != f["size"]:
                        raise FilmcalcError(f"{what}: {member!r} is {info.file_size} bytes, the manifest says "
                                            f"{f['size']}; refused.")
                    with self._disk("unpack the run's files"):
                        staged.append(self._stage_member(zf, info, f, what))
                for s in staged:
                    if s.role == "output" and s.name.endswith(".zarr.zip"):
                        _check_cube_zip(s.path, f"{what}: {s.name}")
            with self._disk("store the run's files"):
                return self._commit(record, tags, staged, new_id=new_id)
        except zipfile.BadZipFile as exc:
            raise FilmcalcError(f"{what} is damaged ({exc}).") from None
        finally:
            for s in staged:
                s.path.unlink(missing_ok=True)

    def _stage_member(self, zf, info, entry, what):
        self._tmp_dir.mkdir(parents=True, exist_ok=True)
        fd, tmp = tempfile.mkstemp(dir=self._tmp_dir, suffix=".part")
        tmp = Path(tmp)
        try:
            with os.fdopen(fd, "wb") as handle, zf.open(info) as source:
                writer = _HashingWriter(handle)
                _copy_hashing(source, writer, limit=entry["size"], what=f"{what}: {info.filename!r}")
                handle.flush()
                os.fsync(handle.fileno())
            if writer.size != entry["size"] or writer.digest.hexdigest() != entry["sha256"]:
                raise FilmcalcError(f"{what}: {info.filename!r} does not match the SHA-256 in the manifest (damaged "
                                    "or altered); refused.")
            return _Staged(entry["role"], entry["name"], tmp, entry["sha256"], entry["size"])
        except BaseException:
            tmp.unlink(missing_ok=True)
            raise


def _check_member_name(name, what):
    if name.startswith("/") or re.match(r"[A-Za-z]:", name):
        raise FilmcalcError(f"{what}: member {name[:80]!r} is an absolute path; refused.")
    if "\\" in name:
        raise FilmcalcError(f"{what}: member {name[:80]!r} contains a backslash; refused.")
    if ".." in name.split("/"):
        raise FilmcalcError(f"{what}: member {name[:80]!r} climbs out with '..'; refused.")
    if name == "manifest.json":
        return
    head, _, rest = name.partition("/")
    if head not in ("inputs", "outputs"):
        raise FilmcalcError(f"{what}: unexpected member {name[:80]!r} (only manifest.json, inputs/ and "
                            "outputs/); refused.")
    try:
        validate_name(rest)
    except FilmcalcError as exc:
        raise FilmcalcError(f"{what}: member {name[:80]!r}: {exc}") from None


def _parse_manifest(manifest, what):
    """Validate an export's manifest → (record for the runs row, tags, file entries)."""
    def bad(message):
        return FilmcalcError(f"{what}: manifest.json {message}; refused.")

    if not isinstance(manifest, dict) or manifest.get("format") != "filmcalc run":
        raise bad("is not a filmcalc run manifest")
    if manifest.get("format_version") != 1:
        raise bad(f"has format version {manifest.get('format_version')!r}; this filmcalc reads version 1")
    run, files = manifest.get("run"), manifest.get("files")
    if not isinstance(run, dict) or not isinstance(files, list):
        raise bad("lacks the run record or the file list")
    try:
        record = {"id": _check_run_id(run.get("id")), "kind": run.get("kind"),
                  "sample": _clean_text(run.get("sample", ""), "sample"), "note": _clean_text(run.get("note", ""), "note"),
                  "saved_by": _clean_text(run.get("saved_by", ""), "saved_by")}
        if record["kind"] not in KINDS:
            raise bad(f"names an unknown kind {str(record['kind'])[:30]!r}")
        created, version = run.get("created_utc"), run.get("filmcalc_version")
        if not isinstance(created, str) or not _TIME.fullmatch(created):
            raise bad("has no valid saving time")
        if not isinstance(version, str) or len(version) > 40 or _CONTROL.search(version):
            raise bad("has no valid filmcalc version")
        record.update(created_utc=created, filmcalc_version=version,
                      settings=_to_json(run.get("settings"), "settings", MAX_JSON_BYTES),
                      summary=_to_json(run.get("summary"), "summary", MAX_SUMMARY_BYTES),
                      provenance=_to_json(run.get("provenance"), "provenance", MAX_JSON_BYTES))
        tags = _clean_tags(run.get("tags") or [])
    except TypeError as exc:
        raise bad(f"has a malformed field ({exc})") from None
    entries, seen = [], set()
    for f in files:
        if not isinstance(f, dict) or f.get("role") not in ROLES:
            raise bad("lists a file without a valid role")
        try:
            name = validate_name(f.get("name"))
        except FilmcalcError as exc:
            raise bad(f"lists a bad file name ({exc})") from None
        sha, size = f.get("sha256"), f.get("size")
        if not isinstance(sha, str) or not _SHA256.fullmatch(sha):
            raise bad(f"lists {name!r} without a valid SHA-256")
        if not isinstance(size, int) or isinstance(size, bool) or size < 0:
            raise bad(f"lists {name!r} without a valid size")
        if (f["role"], name) in seen:
            raise bad(f"lists {name!r} twice")
        seen.add((f["role"], name))
        entries.append({"role": f["role"], "name": name, "sha256": sha, "size": size})
    return record, tags, entries


def _read_version(conn):
    if not sa.inspect(conn).has_table("schema_version"):
        return None
    return conn.scalar(sa.select(sa.func.max(VERSIONS.c.version)))


def _db_message(exc):
    return str(getattr(exc, "orig", None) or exc).strip().splitlines()[0]


def _sqlite_connect(dbapi_connection, connection_record):
    """Every SQLite connection: wait for locks, write-ahead log, foreign keys, our own BEGIN."""
    dbapi_connection.isolation_level = None  # SQLAlchemy's begin event emits BEGIN (see _sqlite_begin)
    cursor = dbapi_connection.cursor()
    try:
        cursor.execute(f"PRAGMA busy_timeout = {SQLITE_BUSY_TIMEOUT_MS}")
        for attempt in range(50):  # switching to WAL needs a moment alone with the file
            try:
                cursor.execute("PRAGMA journal_mode = WAL")
                break
            except Exception as exc:  # sqlite3.OperationalError: database is locked
                if "locked" not in str(exc) or attempt == 49:
                    raise
                time.sleep(0.02 * (1 + random.random()))
        cursor.execute("PRAGMA synchronous = FULL")
        cursor.execute("PRAGMA foreign_keys = ON")
    finally:
        cursor.close()


def _sqlite_begin(conn):
    """Writers take SQLite's write lock at BEGIN (waiting up to the busy timeout); readers do not."""
    conn.exec_driver_sql("BEGIN IMMEDIATE" if conn.get_execution_options().get("filmcalc_write") else "BEGIN")


# ----------------------------------------------------------------------------------------------
# History and comparison (pure computation)
# ----------------------------------------------------------------------------------------------

D2_FOR_TWO = 1.128  # d2 for moving ranges of two points: the mean range of two standard normal values (2/√π)


def _get(run, name):
    return run.get(name) if isinstance(run, dict) else getattr(run, name)


def summary_value(summary, key):
    """The number at a dotted ``key`` of a summary dict (``"statistics.mean_nm"``), or None.

    Booleans, text, missing keys and non-finite numbers give None.

    Examples
    --------
    >>> summary_value({"statistics": {"mean_nm": 101.5}}, "statistics.mean_nm")
    101.5
    """
    value = summary
    for part in str(key).split("."):
        if not isinstance(value, dict) or part not in value:
            return None
        value = value[part]
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        return None
    value = float(value)
    return value if math.isfinite(value) else None


def numeric_summary_keys(runs):
    """Every dotted key that holds a number in at least one run's summary, sorted."""
    keys = set()

    def walk(value, prefix):
        for k, v in value.items():
            if isinstance(v, dict):
                walk(v, f"{prefix}{k}.")
            elif isinstance(v, (int, float)) and not isinstance(v, bool):
                keys.add(f"{prefix}{k}")

    for run in runs:
        summary = _get(run, "summary")
        if isinstance(summary, dict):
            walk(summary, "")
    return sorted(keys)


@dataclasses.dataclass
class HistoryTable:
    """A summary number over time with control limits (see :func:`history_table`).

    Attributes
    ----------
    key : str
    rows : list of dict
        In time order: ``run_id``, ``created_utc``, ``sample``, ``kind``,
        ``tags``, ``value``, ``outside`` (bool) and ``side`` (``"above"``,
        ``"below"`` or ``""``).
    skipped : list of str
        Runs without a number at ``key``.
    mean, sigma, upper, lower : float or None
        Centre line, σ estimate and the limits mean ± k·σ (None with fewer than two values).
    k : float
    sigma_method : str
    baseline : int
        How many of the first values set the limits.
    """

    key: str
    rows: list
    skipped: list
    mean: float | None
    sigma: float | None
    upper: float | None
    lower: float | None
    k: float
    sigma_method: str
    baseline: int

    @property
    def outside(self):
        """The rows outside the control limits."""
        return [r for r in self.rows if r["outside"]]

    def to_dict(self):
        return dataclasses.asdict(self)


def history_table(runs, key, *, sigma_method="moving-range", baseline=None, k=3.0):
    """A chosen summary number per run over time, with mean ± k·σ control limits.

    This is the individuals control chart: each run is one measurement, the
    centre line is the mean, and the limits are mean ± 3σ (NIST/SEMATECH
    e-Handbook of Statistical Methods, section 6.3 "Univariate and
    multivariate control charts", individuals control charts; D. C.
    Montgomery, *Introduction to Statistical Quality Control*, control charts
    for individual measurements). By default σ is estimated from the average
    moving range of successive values, σ̂ = MR̄ / d₂ with d₂ = 1.128 for ranges
    of two (the same sources' table of control chart constants), which a
    slow drift inflates less than the plain standard deviation; with
    ``sigma_method="sample"`` σ is the sample standard deviation (n − 1).

    Parameters
    ----------
    runs : iterable of RunInfo or dict
        Each with ``id``, ``created_utc``, ``summary`` (and ``sample``,
        ``kind``, ``tags`` if known). Order does not matter: rows are sorted
        by time, then id.
    key : str
        Dotted key into the summary (see :func:`summary_value`).
    sigma_method : {'moving-range', 'sample'}
    baseline : int, optional
        Only the first ``baseline`` values (in time) set the mean and σ (a
        reference period); later ones are judged against them. Default: all.
    k : float
        Width of the limits in σ (3 by convention).

    Returns
    -------
    HistoryTable

    Examples
    --------
    Five measurements, the last far off: mean 15.2, moving ranges 2, 1, 2, 17
    (MR̄ = 5.5), σ̂ = 5.5 / 1.128 = 4.876, upper limit 15.2 + 3 × 4.876 = 29.83.

    >>> runs = [{"id": f"r{i}", "created_utc": f"2026-01-0{i}T00:00:00.000000Z", "summary": {"mean_nm": v}}
    ...         for i, v in enumerate([10, 12, 11, 13, 30], start=1)]
    >>> table = history_table(runs, "mean_nm")
    >>> round(table.mean, 3), round(table.sigma, 3), round(table.upper, 2)
    (15.2, 4.876, 29.83)
    >>> [r["run_id"] for r in table.outside]
    ['r5']
    """
    if sigma_method not in ("moving-range", "sample"):
        raise FilmcalcError(f"sigma_method must be 'moving-range' or 'sample' (got {sigma_method!r}).")
    if not (isinstance(k, (int, float)) and k > 0):
        raise FilmcalcError(f"The limits' width k must be a positive number of σ (got {k!r}).")
    ordered = sorted(runs, key=lambda r: (_get(r, "created_utc"), _get(r, "id")))
    rows, skipped = [], []
    for run in ordered:
        value = summary_value(_get(run, "summary") or {}, key)
        if value is None:
            skipped.append(_get(run, "id"))
            continue
        rows.append({"run_id": _get(run, "id"), "created_utc": _get(run, "created_utc"),
                     "sample": _opt(run, "sample", ""), "kind": _opt(run, "kind", ""),
                     "tags": list(_opt(run, "tags", [])), "value": value, "outside": False, "side": ""})
    if baseline is not None and (not isinstance(baseline, int) or baseline < 2):
        raise FilmcalcError(f"The baseline must be at least 2 runs (got {baseline!r}).")
    values = np.array([r["value"] for r in rows], float)
    reference = values if baseline is None else values[:baseline]
    mean = sigma = upper = lower = None
    if reference.size >= 2:
        mean = float(reference.mean())
        if sigma_method == "moving-range":
            sigma = float(np.mean(np.abs(np.diff(reference))) / D2_FOR_TWO)
        else:
            sigma = float(reference.std(ddof=1))
        upper, lower = mean + k * sigma, mean - k * sigma
        for row in rows:
            if row["value"] > upper:
                row["outside"], row["side"] = True, "above"
            elif row["value"] < lower:
                row["outside"], row["side"] = True, "below"
    return HistoryTable(key, rows, skipped, mean, sigma, upper, lower, float(k), sigma_method,
                        int(reference.size))


def _opt(run, name, default):
    try:
        value = _get(run, name)
    except AttributeError:
        return default
    return default if value is None else value


def compare_maps(first, second):
    """Two maps on one colour scale, and their difference (second − first).

    Parameters
    ----------
    first, second : array_like, shape (H, W)
        Thickness maps, nm (NaN where none).

    Returns
    -------
    dict
        ``zmin``, ``zmax``: the shared colour range over both maps' finite
        values (nm); ``difference``: float32 (H, W), NaN where either is NaN;
        ``difference_limit``: max |difference| (a symmetric colour range);
        ``mean_nm``, ``std_nm``, ``rms_nm``: statistics of the difference over
        pixels finite in both; ``pixels``: how many.

    Raises
    ------
    FilmcalcError
        Maps of different sizes.
    """
    a, b = np.asarray(first, np.float32), np.asarray(second, np.float32)
    if a.ndim != 2 or a.shape != b.shape:
        raise FilmcalcError(f"Only maps of the same size can be compared (got {a.shape[::-1]} and "
                            f"{b.shape[::-1]} pixels, width × height).")
    both = np.concatenate([a[np.isfinite(a)], b[np.isfinite(b)]])
    difference = b - a
    good = difference[np.isfinite(difference)]
    out = {"zmin": float(both.min()) if both.size else None, "zmax": float(both.max()) if both.size else None,
           "difference": difference, "pixels": int(good.size)}
    if good.size:
        g = good.astype(np.float64)
        out.update(difference_limit=float(np.abs(g).max()), mean_nm=float(g.mean()), std_nm=float(g.std()),
                   rms_nm=float(np.sqrt(np.mean(g * g))))
    else:
        out.update(difference_limit=None, mean_nm=None, std_nm=None, rms_nm=None)
    return out
