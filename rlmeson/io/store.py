"""A content-addressed cache of numpy arrays in HDF5 files, and atomic file writes.

Nothing here knows about physics.  A caller names an entry by a *kind* (a directory,
e.g. ``"gap"``) and a *key* (normally a hash of everything the result depends on); the
entry lives at ``<root>/<kind>/<key>.h5``.  The root is ``$RLMESON_CACHE`` if set,
else ``$XDG_CACHE_HOME/rlmeson/store``, else ``~/.cache/rlmeson/store``.

File layout (readable with plain h5py, without this package):

* one dataset per array, directly under the root group, named by its dict key; real,
  complex (h5py's usual ``{r, i}`` compound), integer or boolean, any shape, stored
  contiguous and uncompressed in native byte order;
* one root attribute per caller attribute.  A ``str``, ``bool``, ``int`` (that fits in
  64 bits) or ``float`` is stored as a plain HDF5 attribute.  Everything else -- ``None``,
  lists, dicts (nested freely), huge integers, strings containing NUL -- is stored as its
  JSON text (``None`` becomes the string ``"null"``); the names of these attributes are
  listed in the attribute ``json_attrs`` (itself a JSON list), so a plain-h5py reader
  knows which strings to pass through ``json.loads``;
* bookkeeping attributes: ``format`` = ``"rlmeson-store-2"``, ``created_utc`` (ISO 8601),
  ``entry`` (``"<kind>/<key>"``, the name the entry was written under), ``json_attrs``
  and ``checksum``.  ``checksum`` is the hex SHA-256 over, for every dataset in sorted
  name order, its name, dtype (little-endian form), shape and raw bytes (C order,
  little-endian), followed by the canonical JSON of the caller attributes (sorted keys,
  no spaces, ASCII only) and the ``entry`` text.  These five names cannot be used as
  caller attributes.

Every file is written to a temporary name in the same directory, fsynced and renamed
into place, so a reader sees either the old entry, the new one, or none -- never half
of one.  On reading, the checksum is recomputed and ``entry`` compared with the name the
file sits under; an entry that cannot be opened, lacks the checksum, does not match it
(truncated, corrupted, edited) or was written under another name (copied, renamed) is
deleted with a :class:`StoreWarning` and reported as absent, so the caller recomputes it.

Several processes may share one store: :meth:`Store.claim` holds an entry (an OS file
lock under ``<root>/.locks/``, released when the holder ends, also on SIGKILL) around
"look up → compute → write", so no entry is computed twice at once.

Temporary names carry the host and process id (``.<name>.<host>-<pid>-<random>.tmp``);
a temporary file left by a killed process of this host is removed by the next write
into the same directory.  ``try_put`` is ``put`` for callers that can go on without the
cache: if the store cannot be written it warns once and stops trying.
"""

from __future__ import annotations

from collections.abc import Callable, Iterator, Mapping
from contextlib import contextmanager
from dataclasses import dataclass
from datetime import datetime, timezone
import hashlib
import json
import os
from pathlib import Path
import re
import secrets
import socket
import warnings

import h5py
import numpy as np

FORMAT = "rlmeson-store-2"

_RESERVED_ATTRS = frozenset({"format", "created_utc", "entry", "json_attrs", "checksum"})
_NAME_RE = re.compile(r"[A-Za-z0-9_-]+")
_DATASET_RE = re.compile(r"[A-Za-z0-9_][A-Za-z0-9_.-]*")
_MAX_NAME_LEN = 200
_ARRAY_KINDS = frozenset("biufc")  # bool, signed, unsigned, float, complex
_INT64_MIN, _INT64_MAX = -(2**63), 2**63 - 1


class StoreError(RuntimeError):
    """The store cannot do what was asked (e.g. a bad entry cannot be removed)."""


class StoreWarning(UserWarning):
    """A cache entry was unreadable or failed its checksum and has been discarded."""


@dataclass(frozen=True)
class Entry:
    """A cache entry as read back from disk."""

    arrays: dict[str, np.ndarray]
    attrs: dict
    path: Path


# ----------------------------------------------------------------------------------------
# Locations

def default_root() -> Path:
    """``$RLMESON_CACHE``, else ``$XDG_CACHE_HOME/rlmeson/store``, else ``~/.cache/...``."""
    env = os.environ.get("RLMESON_CACHE")
    if env:
        return Path(env).expanduser()
    base = os.environ.get("XDG_CACHE_HOME")
    base_path = Path(base).expanduser() if base else Path.home() / ".cache"
    return base_path / "rlmeson" / "store"


def _check_name(what: str, name: object) -> str:
    if not isinstance(name, str) or not _NAME_RE.fullmatch(name):
        raise ValueError(f"{what} must match [A-Za-z0-9_-]+, got {name!r}")
    if len(name) > _MAX_NAME_LEN:
        raise ValueError(f"{what} is longer than {_MAX_NAME_LEN} characters")
    return name


# ----------------------------------------------------------------------------------------
# Atomic writes

_HOST = re.sub(r"[^A-Za-z0-9_]", "_", socket.gethostname())[:40] or "host"
_TEMP_RE = re.compile(r"\..*\.(?P<host>[A-Za-z0-9_]+)-(?P<pid>[0-9]+)-[0-9a-f]{16}\.tmp")


def _temp_name(final: Path) -> Path:
    stem = final.name[:_MAX_NAME_LEN]  # keep the temporary name within filename limits
    return final.with_name(f".{stem}.{_HOST}-{os.getpid()}-{secrets.token_hex(8)}.tmp")


def temporary_directory(final, create: bool = True) -> Path:
    """A fresh temporary name beside ``final`` (same naming as temporary files, so that
    :func:`remove_stale_temporaries` clears it after a killed process); created empty
    unless ``create`` is False."""
    while True:
        tmp = _temp_name(Path(final))
        if not create:
            if not tmp.exists():
                return tmp
            continue
        try:
            tmp.mkdir()
        except FileExistsError:
            continue
        return tmp


def _alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except (PermissionError, OverflowError, OSError):
        return True  # exists but not ours, or cannot tell: leave it alone
    return True


def remove_stale_temporaries(directory) -> list[Path]:
    """Remove temporary files and directories left in ``directory`` by killed processes of
    this host (named by :func:`_temp_name`); returns what was removed."""
    import shutil

    removed = []
    try:
        names = list(Path(directory).iterdir())
    except OSError:
        return removed
    for p in names:
        m = _TEMP_RE.fullmatch(p.name)
        if m is None or m["host"] != _HOST or _alive(int(m["pid"])):
            continue
        try:
            if p.is_dir() and not p.is_symlink():
                shutil.rmtree(p)
            else:
                p.unlink()
            removed.append(p)
        except OSError:
            pass
    return removed


def _reserve_temp(final: Path) -> Path:
    """Create an empty, uniquely named temporary file next to ``final``."""
    while True:
        tmp = _temp_name(final)
        try:
            fd = os.open(tmp, os.O_CREAT | os.O_EXCL | os.O_WRONLY, 0o666)
        except FileExistsError:
            continue
        os.close(fd)
        return tmp


def _fsync_file(path: Path) -> None:
    fd = os.open(path, os.O_RDWR)
    try:
        os.fsync(fd)
    finally:
        os.close(fd)


def _fsync_dir(directory: Path) -> None:
    """Make a rename durable (POSIX only; best effort)."""
    if os.name != "posix":
        return
    try:
        fd = os.open(directory, os.O_RDONLY)
    except OSError:
        return
    try:
        os.fsync(fd)
    except OSError:
        pass
    finally:
        os.close(fd)


@contextmanager
def atomic_path(path) -> Iterator[Path]:
    """Yield a temporary path next to ``path``; on success move it onto ``path``.

    The temporary file (``.<name>.<random>.tmp`` in the same directory, created empty)
    is for the body to overwrite.  On normal exit it is fsynced and renamed onto
    ``path`` with :func:`os.replace`; if the body raises, it is removed and ``path`` is
    left as it was.  The directory must exist.
    """
    final = Path(path)
    tmp = _reserve_temp(final)
    try:
        yield tmp
        _fsync_file(tmp)
        os.replace(tmp, final)
    except BaseException:
        tmp.unlink(missing_ok=True)
        raise
    _fsync_dir(final.parent)


def atomic_write_bytes(path, data: bytes) -> None:
    """Write ``data`` to ``path`` atomically (all or nothing)."""
    with atomic_path(path) as tmp:
        with open(tmp, "wb") as fh:
            fh.write(data)


def atomic_write_text(path, text: str, encoding: str = "utf-8") -> None:
    """Write ``text`` to ``path`` atomically, encoded without newline translation."""
    atomic_write_bytes(path, text.encode(encoding))


# ----------------------------------------------------------------------------------------
# Arrays

def _prepare_arrays(arrays: Mapping[str, object]) -> dict[str, np.ndarray]:
    """Check names and dtypes; return C-ordered, native-byte-order arrays (0-d kept 0-d)."""
    out = {}
    for name, value in arrays.items():
        if not isinstance(name, str) or not _DATASET_RE.fullmatch(name):
            raise ValueError(f"array name must match [A-Za-z0-9_][A-Za-z0-9_.-]*, got {name!r}")
        arr = np.asarray(value)
        if arr.dtype.kind not in _ARRAY_KINDS:
            raise TypeError(f"array {name!r}: dtype {arr.dtype} is not bool/int/float/complex")
        out[name] = np.asarray(arr, dtype=arr.dtype.newbyteorder("="), order="C")
    return out


def _hash_arrays(digest, arrays: Mapping[str, np.ndarray]) -> None:
    for name in sorted(arrays):
        arr = np.asarray(arrays[name])  # (not ascontiguousarray: it makes 0-d arrays 1-d)
        arr = np.asarray(arr, dtype=arr.dtype.newbyteorder("<"), order="C")
        raw = arr.tobytes()
        header = f"{name}\0{arr.dtype.str}\0{arr.shape}\0{len(raw)}\0"
        digest.update(header.encode("utf-8"))
        digest.update(raw)


# ----------------------------------------------------------------------------------------
# Attributes

def _canonical_json(value) -> str:
    return json.dumps(value, sort_keys=True, separators=(",", ":"), ensure_ascii=True,
                      allow_nan=True)


def _normalize_value(value, where: str):
    """Plain-Python, JSON-faithful copy of an attribute value (tuples become lists)."""
    if value is None or isinstance(value, (bool, str)):
        return value
    if isinstance(value, np.bool_):
        return bool(value)
    if isinstance(value, (int, np.integer)):
        return int(value)
    if isinstance(value, (float, np.floating)):
        return float(value)
    if isinstance(value, (list, tuple)):
        return [_normalize_value(v, f"{where}[{i}]") for i, v in enumerate(value)]
    if isinstance(value, dict):
        for k in value:
            if not isinstance(k, str):
                raise TypeError(f"attribute {where}: dict key {k!r} is not a str")
        return {k: _normalize_value(v, f"{where}.{k}") for k, v in value.items()}
    raise TypeError(f"attribute {where}: unsupported type {type(value).__name__} "
                    "(use str/int/float/bool/None/list/dict; arrays go in datasets)")


def _normalize_attrs(attrs: Mapping[str, object]) -> dict:
    out = {}
    for name, value in attrs.items():
        if not isinstance(name, str) or not name or "\0" in name:
            raise ValueError(f"attribute name must be a non-empty str, got {name!r}")
        if name in _RESERVED_ATTRS:
            raise ValueError(f"attribute name {name!r} is reserved by the store")
        out[name] = _normalize_value(value, name)
    return out


def _is_plain(value) -> bool:
    """Whether a normalized value is stored as a native HDF5 attribute (not JSON)."""
    if isinstance(value, bool):
        return True
    if isinstance(value, int):
        return _INT64_MIN <= value <= _INT64_MAX
    if isinstance(value, float):
        return True
    return isinstance(value, str) and "\0" not in value


def _encode_attr(value):
    if isinstance(value, bool):
        return np.bool_(value)
    if isinstance(value, int):
        return np.int64(value)
    if isinstance(value, float):
        return np.float64(value)
    return value


def _decode_attr(value):
    """Plain HDF5 attribute as read by h5py -> Python value; anything else is an error."""
    if isinstance(value, str):
        return value
    if isinstance(value, np.bool_):
        return bool(value)
    if isinstance(value, np.integer):
        return int(value)
    if isinstance(value, np.floating):
        return float(value)
    raise ValueError(f"unexpected attribute of type {type(value).__name__}")


def _checksum(arrays: Mapping[str, np.ndarray], attrs: Mapping[str, object], entry: str) -> str:
    digest = hashlib.sha256()
    _hash_arrays(digest, arrays)
    digest.update(b"attrs\0")
    digest.update(_canonical_json(attrs).encode("ascii"))
    digest.update(b"\0entry\0" + entry.encode("utf-8"))
    return digest.hexdigest()


# ----------------------------------------------------------------------------------------
# HDF5 reading and writing

def _write_dataset(h5: h5py.File, name: str, array: np.ndarray) -> None:
    h5.create_dataset(name, data=array)


def _write_file(path: Path, arrays: dict[str, np.ndarray], attrs: dict, entry: str, checksum: str) -> None:
    json_names = sorted(k for k, v in attrs.items() if not _is_plain(v))
    with h5py.File(path, "w") as h5:
        for name in sorted(arrays):
            _write_dataset(h5, name, arrays[name])
        for name, value in attrs.items():
            h5.attrs[name] = _canonical_json(value) if name in json_names else _encode_attr(value)
        h5.attrs["format"] = FORMAT
        h5.attrs["created_utc"] = datetime.now(timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ")
        h5.attrs["entry"] = entry
        h5.attrs["json_attrs"] = _canonical_json(json_names)
        h5.attrs["checksum"] = checksum


class _InvalidEntry(Exception):
    """A file that opened but is not a valid store entry."""


def _read_attrs(h5: h5py.File) -> dict:
    json_names = json.loads(h5.attrs["json_attrs"])
    if not isinstance(json_names, list):
        raise _InvalidEntry("json_attrs is not a list")
    attrs = {}
    for name, value in h5.attrs.items():
        if name in _RESERVED_ATTRS:
            continue
        if name in json_names:
            if not isinstance(value, str):
                raise _InvalidEntry(f"attribute {name!r} should be JSON text")
            attrs[name] = json.loads(value)
        else:
            attrs[name] = _decode_attr(value)
    return attrs


def _read_arrays(h5: h5py.File) -> dict[str, np.ndarray]:
    arrays = {}
    for name, obj in h5.items():
        if not isinstance(obj, h5py.Dataset):
            raise _InvalidEntry(f"{name!r} is not a dataset")
        arrays[name] = np.asarray(obj[()])
    return arrays


def _read_entry(path: Path, entry: str) -> Entry:
    """Read and verify an entry that should be ``entry`` (kind/key); raises on anything
    unreadable or inconsistent."""
    with h5py.File(path, "r") as h5:
        if h5.attrs.get("format") != FORMAT:
            raise _InvalidEntry(f"format is {h5.attrs.get('format')!r}, not {FORMAT!r}")
        stored = h5.attrs.get("checksum")
        if not isinstance(stored, str):
            raise _InvalidEntry("no checksum attribute")
        written_as = h5.attrs.get("entry")
        if written_as != entry:
            raise _InvalidEntry(f"written as {written_as!r}, found under {entry!r} (copied or renamed)")
        arrays = _read_arrays(h5)
        attrs = _read_attrs(h5)
    if _checksum(arrays, attrs, entry) != stored:
        raise _InvalidEntry("checksum mismatch")
    return Entry(arrays=arrays, attrs=attrs, path=path)


def _file_identity(path: Path) -> tuple | None:
    try:
        st = os.stat(path)
    except OSError:  # absent, or a path through a file or an unreadable directory: a miss
        return None
    return (st.st_dev, st.st_ino, st.st_size, st.st_mtime_ns)


# ----------------------------------------------------------------------------------------
# The store

class Store:
    """Content-addressed HDF5 cache under ``root`` (see the module docstring)."""

    def __init__(self, root=None):
        self.root = Path(root).expanduser() if root is not None else default_root()
        self.unwritable: str | None = None  # set by try_put after the first failed write

    def __repr__(self) -> str:
        return f"Store({str(self.root)!r})"

    def path(self, kind: str, key: str) -> Path:
        """``root / kind / f"{key}.h5"``; ``kind`` and ``key`` must match [A-Za-z0-9_-]+."""
        return self.root / _check_name("kind", kind) / f"{_check_name('key', key)}.h5"

    def put(self, kind: str, key: str, arrays: Mapping[str, np.ndarray],
            attrs: Mapping[str, object]) -> Path:
        """Write (or replace) an entry atomically; returns its path."""
        final = self.path(kind, key)
        arrays = _prepare_arrays(arrays)
        attrs = _normalize_attrs(attrs)
        entry = f"{kind}/{key}"
        checksum = _checksum(arrays, attrs, entry)
        final.parent.mkdir(parents=True, exist_ok=True)
        remove_stale_temporaries(final.parent)
        with atomic_path(final) as tmp:
            _write_file(tmp, arrays, attrs, entry, checksum)
        return final

    def try_put(self, kind: str, key: str, arrays: Mapping[str, np.ndarray],
                attrs: Mapping[str, object]) -> Path | None:
        """``put``, but a store that cannot be written (full disk, permissions, a file
        where a directory should be) gives one :class:`StoreWarning` and is not tried
        again by this object; returns None then."""
        if self.unwritable is not None:
            return None
        try:
            return self.put(kind, key, arrays, attrs)
        except OSError as e:
            self.unwritable = f"{e.strerror or type(e).__name__}"
            warnings.warn(f"cannot write the result cache at {self.root} ({self.unwritable}); "
                          "going on without caching", StoreWarning, stacklevel=2)
            return None

    def check_writable(self) -> str | None:
        """Why the store cannot be written (one phrase), or None if it can: creates the
        root if needed and a temporary file in it, removed at once."""
        where = self.root
        try:
            if where.exists() and not where.is_dir():
                return f"{where} exists and is not a directory"
            where.mkdir(parents=True, exist_ok=True)
            tmp = _reserve_temp(where / "probe")
            tmp.unlink()
        except OSError as e:
            return f"{where}: {e.strerror or type(e).__name__}"
        return None

    def get(self, kind: str, key: str) -> Entry | None:
        """The verified entry, or None if absent or invalid (an invalid file is deleted)."""
        path = self.path(kind, key)
        identity = _file_identity(path)
        if identity is None:
            return None
        try:
            return _read_entry(path, f"{kind}/{key}")
        except Exception as exc:  # noqa: BLE001  (any failure to read means: recompute)
            _discard(path, identity, exc)
            return None

    def fetch_or_compute(self, kind: str, key: str,
                         compute: Callable[[], tuple[dict, dict]]) -> tuple[Entry, bool]:
        """``(entry, hit)``: the cached entry, or on a miss ``compute()`` stored and re-read."""
        entry = self.get(kind, key)
        if entry is not None:
            return entry, True
        result = compute()
        if not (isinstance(result, tuple) and len(result) == 2):
            raise StoreError("compute() must return a tuple (arrays, attrs)")
        arrays, attrs = result
        self.put(kind, key, arrays, attrs)
        entry = self.get(kind, key)
        if entry is None:
            raise StoreError(f"entry {kind}/{key} could not be read back after writing")
        return entry, False

    def lock_path(self, kind: str, key: str) -> Path:
        """Where the lock of an entry lives: ``root/.locks/<kind>-<key>.lock`` (outside the
        kind directories, so a lock is never taken for an entry)."""
        return self.root / ".locks" / f"{_check_name('kind', kind)}-{_check_name('key', key)}.lock"

    @contextmanager
    def claim(self, kind: str, key: str, waiting: Callable[[str], None] | None = None) -> Iterator[None]:
        """Hold the entry ``kind/key`` for "look up → compute → write": another process
        (or thread) claiming the same entry waits until this block ends, then finds the
        entry in the store instead of computing it again.  ``waiting(message)`` is called
        once if the entry is held by someone else.

        The lock is an OS file lock (``filelock``): it is released when the holder exits,
        also when it is killed (SIGKILL), so a lock file left behind is harmless -- the next
        claim takes it at once.  A store whose lock directory cannot be created (read-only)
        is used without locking."""
        from filelock import FileLock, Timeout

        path = self.lock_path(kind, key)
        try:
            path.parent.mkdir(parents=True, exist_ok=True)
            lock = FileLock(str(path))
            try:
                lock.acquire(timeout=0)
            except Timeout:
                if waiting is not None:
                    waiting(f"{kind} entry {key[:12]}… is being computed by another process; waiting for it")
                lock.acquire()
        except OSError:
            lock = None
        try:
            yield
        finally:
            if lock is not None:
                lock.release()


def _discard(path: Path, identity: tuple, exc: Exception) -> None:
    """Delete an invalid entry (unless it was replaced meanwhile) and warn."""
    if _file_identity(path) is None:
        return  # removed by someone else between stat and open: simply absent
    reason = f"{type(exc).__name__}: {exc}"
    if _file_identity(path) == identity:
        try:
            path.unlink(missing_ok=True)
        except OSError as err:
            raise StoreError(f"cannot remove invalid cache entry {path}: {err}") from err
        action = "deleted"
    else:
        action = "left in place (replaced concurrently)"
    warnings.warn(f"invalid cache entry {path} {action}; it will be recomputed ({reason})",
                  StoreWarning, stacklevel=3)  # -> the caller of get()


def writable_directory(out) -> Path:
    """``out`` as an existing, writable directory (created if absent), checked before the
    long work that will write into it; a one-line ValueError otherwise."""
    d = Path(out).expanduser()
    if d.exists() and not d.is_dir():
        raise ValueError(f"out = {str(d)!r}: a directory (this is an existing file)")
    try:
        d.mkdir(parents=True, exist_ok=True)
    except OSError as e:
        raise ValueError(f"out = {str(d)!r}: a directory that can be created ({e.strerror or e})") from None
    if not os.access(d, os.W_OK):
        raise ValueError(f"out = {str(d)!r}: a writable directory")
    return d
