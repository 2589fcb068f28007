"""Output file names built from codes and ids, and all-or-nothing file writes.

Every output file whose name holds a unit code, a well id or another imported text takes that part from
:func:`file_stem` and its path from :func:`output_path`, so a code such as ``../../x`` or ``/x`` can never place
a file outside the output folder; the commands that read outputs back (map, layers, figures, grid) find them
through the same two functions. Writers write to a hidden temporary file in the destination folder and move it
into place with :func:`os.replace` (:func:`atomic_path`), so a full disk or an error leaves the earlier file, or
none, never half a file.
"""

from __future__ import annotations

import errno
import hashlib
import os
import re
import secrets
from contextlib import contextmanager
from pathlib import Path, PurePosixPath, PureWindowsPath

from ..errors import HydroatlasError, ParameterError, StoreError

#: characters a file-name part keeps; every other character becomes "_"
_UNSAFE = re.compile(r"[^A-Za-z0-9._-]")
#: hex digits of the SHA-256 suffix added when a code had to be changed
HASH_DIGITS = 12
_HASH_TAIL = re.compile(rf"-[0-9a-f]{{{HASH_DIGITS}}}$")
#: longest stem, hash included (leaves room for "_<quantity>.<ext>" under the usual 255-byte limit)
MAX_STEM = 96
# names Windows refuses whatever their extension
_RESERVED = {"CON", "PRN", "AUX", "NUL", *(f"COM{i}" for i in range(1, 10)), *(f"LPT{i}" for i in range(1, 10))}
# files SQLite may leave beside a database (GeoPackage) while writing it
_SQLITE_COMPANIONS = ("-journal", "-wal", "-shm")


def file_stem(code) -> str:
    """A file-name part for a code or id: the code itself when it is a plain name, else a safe stand-in.

    Letters, digits, ``.``, ``_`` and ``-`` are kept; any other character becomes ``_``, as do leading and
    trailing dots; names Windows reserves get a leading ``_``; long results are cut. Whenever anything changed
    (or the code itself ends like a suffix of this kind), ``-`` and the first 12 hex digits of the SHA-256 of
    the code are appended, so two distinct codes never share a stem and a changed stem never equals a plain
    code. Plain codes are returned unchanged: ``ULS`` gives ``ULS``, hence ``ULS_head.tif``.

    >>> file_stem("ULS")
    'ULS'
    >>> file_stem("../../x")
    '___.._x-9cdf6a50100a'
    """
    text = "" if code is None else str(code)
    stem = _UNSAFE.sub("_", text)
    core = stem.strip(".")
    lead = len(stem) - len(stem.lstrip("."))
    trail = len(stem) - len(stem.rstrip(".")) if core else 0
    stem = "_" * lead + core + "_" * trail if core else "_" * len(stem)
    if stem.split(".")[0].upper() in _RESERVED:
        stem = "_" + stem
    if stem == text and text and len(text) <= MAX_STEM and not _HASH_TAIL.search(text):
        return text
    digest = hashlib.sha256(text.encode("utf-8", "surrogatepass")).hexdigest()[:HASH_DIGITS]
    return (stem[: MAX_STEM - HASH_DIGITS - 1] or "_") + "-" + digest


def output_path(folder, name) -> Path:
    """``folder / name`` after checking that ``name`` is one plain file name that stays in ``folder``.

    Raises
    ------
    ParameterError
        When ``name`` is empty, ``.`` or ``..``, holds a path separator or a drive, or would otherwise
        resolve outside ``folder``.
    """
    name = str(name)
    folder = Path(folder)
    plain = (name not in ("", ".", "..") and "\0" not in name
             and PurePosixPath(name).name == name and PureWindowsPath(name).name == name)
    # one plain component cannot climb out; the resolved parent must still be the resolved folder
    if not plain or (folder.resolve() / name).parent != folder.resolve():
        raise ParameterError(f"output file name {name!r} would leave the output folder {folder}")
    return folder / name


def unit_path(folder, unit, tail: str) -> Path:
    """``folder/<stem of unit>_<tail>``, the path of a per-unit output such as ``ULS_head.tif`` (SPEC 5)."""
    return output_path(folder, f"{file_stem(unit)}_{tail}")


def ensure_folder(folder) -> Path:
    """Create ``folder`` (and its parents) when missing; a clear :class:`StoreError` when that fails."""
    folder = Path(folder)
    try:
        folder.mkdir(parents=True, exist_ok=True)
    except FileExistsError:
        raise StoreError(f"the output folder {folder} is a file, not a folder") from None
    except OSError as exc:
        raise StoreError(f"cannot create the output folder {folder}: {exc.strerror or exc}") from None
    if not os.access(folder, os.W_OK | os.X_OK):
        raise StoreError(f"the output folder {folder} is not writable")
    return folder


@contextmanager
def atomic_path(path):
    """Yield a temporary path beside ``path``; move it onto ``path`` when the block ends without error.

    The temporary name keeps the extension (some writers pick the format from it) and starts with a dot.
    On any error the temporary file (and any SQLite companion of it) is removed, so no partial output is
    left and an existing ``path`` is untouched. An :class:`OSError` (disk full, no permission) becomes a
    :class:`StoreError` that names the file and the folder.
    """
    path = Path(path)
    folder = ensure_folder(path.parent)
    tmp = folder / f".{path.stem[:40]}.{secrets.token_hex(6)}.part{path.suffix}"
    try:
        yield tmp
        os.replace(tmp, path)
    except BaseException as exc:
        for leftover in [tmp] + [tmp.with_name(tmp.name + c) for c in _SQLITE_COMPANIONS]:
            try:
                leftover.unlink()
            except OSError:
                pass
        if isinstance(exc, OSError) and not isinstance(exc, HydroatlasError):
            why = "the disk is full" if exc.errno == errno.ENOSPC else (exc.strerror or str(exc))
            raise StoreError(f"cannot write {path.name} in the output folder {folder}: {why}") from exc
        raise


def write_text(path, text: str) -> Path:
    """Write a UTF-8 text file all at once (see :func:`atomic_path`)."""
    path = Path(path)
    with atomic_path(path) as tmp:
        tmp.write_text(text, encoding="utf-8")
    return path


def write_csv(path, frame) -> Path:
    """Write a pandas DataFrame as CSV (no index) all at once (see :func:`atomic_path`)."""
    path = Path(path)
    with atomic_path(path) as tmp:
        frame.to_csv(tmp, index=False)
    return path
