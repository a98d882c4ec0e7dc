"""On-disk store of computed spectra, shared by every process of one user.

A simulated spectrum costs tenths of a second to compute; the arrays it yields are kept as
``.npz`` files (numpy, no pickles) named by the SHA-256 of a canonical JSON of everything the
computation depends on, so that later processes load them instead.

Directory
    ``$BANDWRIGHT_CACHE_DIR/spectrum-profiles``; without the variable, the user cache directory
    (:func:`platformdirs.user_cache_dir`, e.g. ``~/.cache/bandwright``).  An empty value or
    ``off`` switches the store off (everything stays in memory).  The variable is read at each
    lookup, so a library user, the command line and the service all follow it without wiring.
Atomicity
    A writer saves to a temporary file in the same directory and renames it into place with
    :func:`os.replace`, so a reader sees a whole old file, a whole new one or none; concurrent
    writers of one key each rename a complete file and the last one stays.
Failures
    A missing, truncated, corrupt or mismatched file is a miss (the caller recomputes and the file
    is rewritten); an unwritable directory is logged once as a warning and never written again in
    this process, while reads from it go on.
"""

from __future__ import annotations

import contextlib
import dataclasses
import enum
import hashlib
import json
import logging
import os
import tempfile
import threading
import zipfile
from collections.abc import Mapping
from pathlib import Path
from typing import Any, Final

import numpy as np
import numpy.typing as npt
import scipy
from platformdirs import user_cache_dir

__all__ = [
    "CACHE_DIR_ENV",
    "OFF_VALUES",
    "cache_dir",
    "canonical_json",
    "key_digest",
    "key_fields",
    "load_arrays",
    "resolve_cache_dir",
    "store_arrays",
]

logger = logging.getLogger(__name__)

FloatArray = npt.NDArray[np.float64]

CACHE_DIR_ENV: Final = "BANDWRIGHT_CACHE_DIR"
OFF_VALUES: Final = frozenset({"", "off"})
"""Values of :data:`CACHE_DIR_ENV` (case-insensitive, surrounding blanks ignored) that switch
the store off."""
APP_NAME: Final = "bandwright"
SUBDIRECTORY: Final = "spectrum-profiles"
KEY_ENTRY: Final = "key"
"""Name of the array inside each file that repeats the canonical key (checked on load)."""

_unwritable: set[Path] = set()
_unwritable_lock = threading.Lock()


def cache_dir() -> Path | None:
    """The directory of stored spectra from :data:`CACHE_DIR_ENV`, or ``None`` when off."""
    return resolve_cache_dir(os.environ.get(CACHE_DIR_ENV))


def resolve_cache_dir(value: str | None) -> Path | None:
    """The directory of stored spectra for a value of :data:`CACHE_DIR_ENV`.

    ``None`` (unset) gives the user cache directory; a value in :data:`OFF_VALUES` gives ``None``
    (store off); anything else is a directory, ``~`` expanded.

    >>> resolve_cache_dir("/var/cache/bw").as_posix()
    '/var/cache/bw/spectrum-profiles'
    >>> resolve_cache_dir(" OFF ") is None and resolve_cache_dir("") is None
    True
    >>> resolve_cache_dir(None).name
    'spectrum-profiles'
    """
    if value is None:
        return Path(user_cache_dir(APP_NAME)) / SUBDIRECTORY
    if value.strip().lower() in OFF_VALUES:
        return None
    return Path(value).expanduser() / SUBDIRECTORY


def key_fields(
    *,
    version: int,
    key: object,
    parameters: Mapping[str, object],
    inputs: Mapping[str, npt.NDArray[Any]],
) -> dict[str, object]:
    """Everything one stored computation depends on, as plain JSON values.

    Parameters
    ----------
    version : int
        Version of the computation; raise it whenever a change of code changes the results.
    key : dataclass instance
        The caller's key; every field enters (dataclasses and enums are spelled out), so a
        field added later changes every file name.
    parameters : mapping
        Module constants and arguments the computation uses (sizes, seeds, window names …).
    inputs : mapping of arrays
        Arrays computed by other modules (filter taps, constellation points): their SHA-256
        enters, so that a change there is noticed without a version change here.

    The numpy and scipy versions enter too: an upgrade may change the last bits of an FFT.

    >>> from solver.model import Amplifier
    >>> fields = key_fields(version=1, key=Amplifier(), parameters={"n": 4}, inputs={})
    >>> fields["key"]
    {'model': 'rapp', 'smoothness': 2.0, 'output_backoff_db': 6.0}
    """
    return {
        "version": version,
        "key": _plain(key),
        "parameters": _plain(parameters),
        "inputs": {name: _array_digest(array) for name, array in inputs.items()},
        "libraries": {"numpy": np.__version__, "scipy": scipy.__version__},
    }


def _plain(value: object) -> object:
    """``value`` as JSON values: dataclass → dict of its fields, enum → its value."""
    if dataclasses.is_dataclass(value) and not isinstance(value, type):
        fields = dataclasses.fields(value)
        return {f.name: _plain(getattr(value, f.name)) for f in fields}
    if isinstance(value, enum.Enum):
        return _plain(value.value)
    if isinstance(value, Mapping):
        return {str(name): _plain(item) for name, item in value.items()}
    if isinstance(value, tuple | list):
        return [_plain(item) for item in value]
    if value is None or isinstance(value, bool | int | float | str):
        return value
    raise TypeError(f"{value!r} ({type(value).__name__}) has no canonical JSON form")


def _array_digest(array: npt.NDArray[Any]) -> str:
    contiguous = np.ascontiguousarray(array)
    digest = hashlib.sha256(f"{contiguous.dtype.str}{contiguous.shape}".encode())
    digest.update(contiguous.tobytes())
    return digest.hexdigest()


def canonical_json(fields: Mapping[str, object]) -> str:
    """Canonical JSON of ``fields``: sorted keys, no blanks, floats in shortest round-trip form."""
    return json.dumps(fields, sort_keys=True, separators=(",", ":"), allow_nan=False)


def key_digest(fields: Mapping[str, object]) -> str:
    """SHA-256 (hex) of :func:`canonical_json` of ``fields``: the file's stem.

    >>> key_digest({"b": 1, "a": 0.5}) == key_digest({"a": 0.5, "b": 1})
    True
    """
    return hashlib.sha256(canonical_json(fields).encode()).hexdigest()


def _path(directory: Path, fields: Mapping[str, object]) -> Path:
    return directory / f"{key_digest(fields)}.npz"


def load_arrays(
    fields: Mapping[str, object], names: tuple[str, ...]
) -> dict[str, FloatArray] | None:
    """The 1-D float64 arrays ``names`` stored under ``fields``, or ``None`` on any miss.

    A miss is: store switched off, no file, a file numpy cannot read, a key inside the file that
    differs from ``fields``, or an array missing or not 1-D float64.
    """
    directory = cache_dir()
    if directory is None:
        return None
    path = _path(directory, fields)
    try:
        with np.load(path, allow_pickle=False) as stored:
            if str(stored[KEY_ENTRY]) != canonical_json(fields):
                raise ValueError("the key stored in the file differs")
            arrays = {name: stored[name] for name in names}
    except FileNotFoundError:
        return None
    except (OSError, ValueError, KeyError, EOFError, zipfile.BadZipFile) as exc:
        logger.info("spectrum cache file %s is unreadable (%s); recomputing", path, exc)
        return None
    if any(a.ndim != 1 or a.dtype != np.float64 for a in arrays.values()):
        logger.info("spectrum cache file %s holds unexpected arrays; recomputing", path)
        return None
    return arrays


def store_arrays(fields: Mapping[str, object], arrays: Mapping[str, FloatArray]) -> None:
    """Save ``arrays`` under ``fields`` atomically; on failure warn once per directory.

    A failure to write is logged, not raised: the store is an optimisation, and the caller
    already has the arrays.
    """
    directory = cache_dir()
    if directory is None or directory in _unwritable:
        return
    if KEY_ENTRY in arrays:
        raise ValueError(f"{KEY_ENTRY!r} is reserved for the key and cannot name an array")
    path = _path(directory, fields)
    temporary: str | None = None
    try:
        directory.mkdir(parents=True, exist_ok=True)
        handle, temporary = tempfile.mkstemp(dir=directory, prefix=f".{path.stem}.", suffix=".tmp")
        with os.fdopen(handle, "wb") as file:
            # Any: numpy's stub would match the mapping against savez's own keyword arguments.
            contents: dict[str, Any] = {KEY_ENTRY: np.array(canonical_json(fields)), **arrays}
            np.savez(file, **contents)
        os.replace(temporary, path)
        temporary = None
    except OSError as exc:
        _give_up(directory, exc)
    finally:
        if temporary is not None:
            with contextlib.suppress(OSError):
                os.unlink(temporary)


def _give_up(directory: Path, exc: OSError) -> None:
    with _unwritable_lock:
        first = directory not in _unwritable
        _unwritable.add(directory)
    if first:
        logger.warning(
            "cannot write the spectrum cache in %s (%s); profiles stay in memory only "
            "(set %s to another directory, or to 'off')",
            directory,
            exc,
            CACHE_DIR_ENV,
        )
