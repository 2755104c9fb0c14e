"""Files in and out: the one home of atomic writes, input reads and file digests.

Every file synthgen writes appears under its final name only once complete: it is written
under a temporary name beside the target (``.NAME.XXXX.tmp``) and renamed over it, so a
killed run never leaves a truncated file under the final name.  Two strengths:

* :func:`write_atomic`, :func:`staged_file` and :class:`AtomicWriter` fsync the file before
  the rename and the directory after it (annotations, manifests, results, reports: a crash
  leaves the old file or the whole new one);
* :func:`write_unsynced` skips the fsync (the images of a run, thousands of small files whose
  damage by a power cut the digests catch on ``--resume``), and :func:`staged_dir` builds a
  whole directory that way and swaps it in at once.

Temporary files get the permissions a plain ``open()`` would give (``0666`` less the umask).
"""

from __future__ import annotations

import contextlib
import hashlib
import os
import shutil
import tempfile
from collections.abc import Iterator
from pathlib import Path

from synthgen.errors import InputFileError

__all__ = [
    "write_atomic",
    "write_unsynced",
    "staged_file",
    "staged_dir",
    "AtomicWriter",
    "temp_beside",
    "publish_mode",
    "fsync_dir",
    "named_os_errors",
    "read_input",
    "read_input_text",
    "read_json",
    "sha256_file",
]


# --------------------------------------------------------------------------- writing


def _umask() -> int:
    mask = os.umask(0o022)  # reading the umask means setting it; put it straight back
    os.umask(mask)
    return mask


def publish_mode(path: Path, *, directory: bool = False) -> None:
    """Give a staged temporary file or directory the permissions of a plain one.

    ``tempfile`` creates its files 0600 and directories 0700 (private to the
    owner); a dataset is meant to be read by others, so before the rename the
    staged path gets ``0666`` (``0777`` for a directory) less the umask, what
    ``open()`` or ``mkdir()`` would have given it.
    """
    os.chmod(path, (0o777 if directory else 0o666) & ~_umask())


def temp_beside(final: Path) -> tuple[int, str]:
    """``mkstemp`` beside ``final``, with the permissions a plain write would give (see :func:`publish_mode`).

    Returns the open descriptor and the temporary name; the caller renames it over ``final``.
    """
    final = Path(final)
    fd, name = tempfile.mkstemp(dir=final.parent, prefix=f".{final.name}.", suffix=".tmp")
    os.fchmod(fd, 0o666 & ~_umask())
    return fd, name


def fsync_dir(path: Path) -> None:
    """Make a rename in ``path`` durable, where the platform allows it."""
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


@contextlib.contextmanager
def staged_file(final: Path) -> Iterator[Path]:
    """Yield a temporary file path beside ``final``, renamed over it on success.

    The file is fsync'ed before the rename and the directory after it, so a
    crash leaves either the old file or the whole new one under ``final``.
    """
    final = Path(final)
    final.parent.mkdir(parents=True, exist_ok=True)
    fd, name = temp_beside(final)
    os.close(fd)
    tmp = Path(name)
    try:
        yield tmp
        with open(tmp, "rb+") as f:
            os.fsync(f.fileno())
        os.replace(tmp, final)
    except BaseException:
        tmp.unlink(missing_ok=True)
        raise
    fsync_dir(final.parent)


def write_atomic(path, data: bytes) -> None:
    """Write ``data`` to ``path`` through a fsync'ed temporary file and a rename.

    Parameters
    ----------
    path : str or Path
        Final file name (its directory is created when missing).
    data : bytes
    """
    with staged_file(Path(path)) as tmp:
        tmp.write_bytes(data)


@contextlib.contextmanager
def named_os_errors(path: Path):
    """Attach ``path`` to an OSError raised without a file name (e.g. by a buffered write)."""
    try:
        yield
    except OSError as exc:
        if exc.filename:
            raise
        raise OSError(exc.errno, exc.strerror or str(exc), str(path)) from None


def write_unsynced(path: Path, data: bytes) -> None:
    """Write ``data`` to ``path`` under the temporary name ``.NAME.tmp`` beside it, then rename.

    No fsync: a killed process cannot leave a truncated file under ``path``, and
    damage from a power cut is caught by the digests on ``--resume``.  An OSError
    names ``path``.
    """
    tmp = path.parent / f".{path.name}.tmp"
    try:
        with named_os_errors(path):
            tmp.write_bytes(data)
            os.replace(tmp, path)
    except BaseException:
        tmp.unlink(missing_ok=True)  # give back the space of a partial file
        raise


@contextlib.contextmanager
def staged_dir(final: Path) -> Iterator[Path]:
    """Yield a temporary directory beside ``final`` that replaces it on success.

    Files inside are written without a per-file fsync (thousands of small
    files); the directory appears under its final name only once complete, and
    an existing directory of that name is replaced as a whole.
    """
    final = Path(final)
    final.parent.mkdir(parents=True, exist_ok=True)
    tmp = Path(tempfile.mkdtemp(dir=final.parent, prefix=f".{final.name}.", suffix=".tmp"))
    try:
        yield tmp
        publish_mode(tmp, directory=True)
        old = None
        if final.exists():
            old = final.parent / f".{final.name}.old-{os.getpid()}"
            os.replace(final, old)
        os.replace(tmp, final)
        if old is not None:
            shutil.rmtree(old, ignore_errors=True)
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise


class AtomicWriter:
    """A file written in pieces under a temporary name, fsync'ed and renamed over ``path`` on success.

    Use as a context manager; on an exception the temporary file is removed and
    ``path`` is untouched.  ``sha256`` holds the digest of what was written.
    """

    def __init__(self, path: Path, buffering: int = 1 << 20):
        self.path = Path(path)
        self._buffering = buffering
        self.sha256 = hashlib.sha256()

    def __enter__(self):
        fd, self._tmp = temp_beside(self.path)
        self._f = os.fdopen(fd, "wb", buffering=self._buffering)
        return self

    def write(self, data: bytes) -> None:
        self.sha256.update(data)
        try:
            self._f.write(data)
        except OSError as exc:
            raise self._named(exc) from None

    def _named(self, exc: OSError) -> OSError:
        return OSError(exc.errno, exc.strerror or str(exc), str(self.path))

    def __exit__(self, exc_type, exc, tb):
        try:
            if exc_type is None:
                self._f.flush()
                os.fsync(self._f.fileno())
            self._f.close()
            if exc_type is None:
                os.replace(self._tmp, self.path)
                fsync_dir(self.path.parent)
        except OSError as err:
            raise self._named(err) from None
        finally:
            if not self._f.closed:
                try:
                    self._f.close()
                except OSError:
                    pass
            if os.path.exists(self._tmp):
                os.unlink(self._tmp)
        return False


# --------------------------------------------------------------------------- reading


def read_input(path) -> bytes:
    """The bytes of an input file; a missing or unreadable one is an :class:`InputFileError` naming it."""
    try:
        return Path(path).read_bytes()
    except OSError as e:
        raise InputFileError(path, f"cannot be read ({e.strerror or e})") from None


def read_input_text(path) -> str:
    """An input file as UTF-8 text (see :func:`read_input`); other encodings are an InputFileError too."""
    raw = read_input(path)
    try:
        return raw.decode("utf-8")
    except UnicodeDecodeError as e:
        raise InputFileError(path, f"cannot be read as UTF-8 text ({e.reason} at byte {e.start})") from None


def read_json(path):
    """An input file parsed as JSON (see :func:`read_input`); invalid JSON is an InputFileError naming it."""
    import orjson

    data = read_input(path)
    try:
        return orjson.loads(data)
    except orjson.JSONDecodeError as exc:
        raise InputFileError(path, f"is not valid JSON ({exc})") from None


def sha256_file(path: Path) -> str | None:
    """sha256 hex of a file's bytes, or None when it cannot be read."""
    h = hashlib.sha256()
    try:
        with open(path, "rb") as f:
            for block in iter(lambda: f.read(1 << 20), b""):
                h.update(block)
    except OSError:
        return None
    return h.hexdigest()
