"""Arrays kept on disk between runs, keyed by a hash of everything they depend on.

The band tables of :mod:`stelltemp.bandgrid` take a large part of a short
run to build (a Planck integral through the passband for every node of the
temperature × E(B−V) grid, the extinction law evaluated on the band's
wavelengths, the Vega spectrum read and integrated).  They depend only on
the passband curve, the extinction law and R_V, the grid and the code that
builds them, so they are built once and kept in the user's cache folder:

* ``$STELLTEMP_CACHE_DIR`` if set (``off`` or an empty value: no disk cache);
* else ``$XDG_CACHE_HOME/stelltemp`` or ``~/.cache/stelltemp`` (Linux and
  other Unix), ``~/Library/Caches/stelltemp`` (macOS),
  ``%LOCALAPPDATA%\\stelltemp\\cache`` (Windows).

Each entry is one ``.npz`` file named by the SHA-256 of its key: the key
holds the content (not the name) of every input, so an entry is never
stale: a changed passband curve, law, package version or build code gives
a new name, and the old file is simply no longer read.  Files are written
to a temporary name in the same folder and renamed into place
(`stelltemp.safeio.atomic_path`), so two
processes building the same entry at once each write a whole file and the
last rename wins with identical content; a reader never sees half a file.
An unreadable or damaged entry is rebuilt; a folder that cannot be
written leaves the run without a disk cache (nothing fails).
"""

import hashlib
import os
import sys
import zipfile
from pathlib import Path

import numpy as np

ENV_VAR = "STELLTEMP_CACHE_DIR"
#: bump when the layout of the entries changes
FORMAT = "1"


def cache_dir():
    """The cache folder (a Path), or None when the disk cache is switched off."""
    env = os.environ.get(ENV_VAR)
    if env is not None:
        env = env.strip()
        return None if env in ("", "off", "0", "none") else Path(env).expanduser()
    if sys.platform == "win32":
        base = os.environ.get("LOCALAPPDATA")
        return Path(base) / "stelltemp" / "cache" if base else None
    if sys.platform == "darwin":
        return Path.home() / "Library" / "Caches" / "stelltemp"
    base = os.environ.get("XDG_CACHE_HOME") or str(Path.home() / ".cache")
    return Path(base) / "stelltemp"


def digest(*parts):
    """SHA-256 (hex) of a key: str, bytes, numbers and numpy arrays (by content)."""
    h = hashlib.sha256(FORMAT.encode())
    for part in parts:
        if isinstance(part, np.ndarray):
            arr = np.ascontiguousarray(part)
            h.update(f"array:{arr.dtype.str}:{arr.shape}".encode())
            h.update(arr.tobytes())
        elif isinstance(part, bytes):
            h.update(b"bytes:" + part)
        else:
            h.update(f"{type(part).__name__}:{part!r}".encode())
        h.update(b"\0")
    return h.hexdigest()


def load_or_build(kind, key, build):
    """The arrays of entry ``kind``/``key`` from the disk cache, else ``build()`` (and store them).

    Parameters
    ----------
    kind : str
        Short name of the kind of entry (file name prefix).
    key : str
        `digest` of everything the arrays depend on.
    build : callable
        Returns a dict of name → ndarray.

    Returns
    -------
    dict of ndarray
    """
    folder = cache_dir()
    if folder is None:
        return build()
    path = folder / f"{kind}-{key[:40]}.npz"
    try:
        with np.load(path, allow_pickle=False) as stored:
            return {name: stored[name] for name in stored.files}
    except (OSError, ValueError, KeyError, EOFError, zipfile.BadZipFile):
        pass  # missing or damaged: build it again
    arrays = build()
    _store(folder, path, arrays)
    return arrays


def _store(folder, path, arrays):
    """Write ``arrays`` to ``path`` through `stelltemp.safeio.atomic_path`; give up quietly when it cannot."""
    from .errors import StelltempError
    from .safeio import atomic_path

    try:
        folder.mkdir(parents=True, exist_ok=True)
        with atomic_path(path, overwrite=True) as tmp, open(tmp, "wb") as fh:
            np.savez(fh, **arrays)
    except (OSError, StelltempError):
        pass  # read-only or full: this run goes on without a disk cache


def file_digest(path):
    """SHA-256 of a file's bytes (the content key of a data file)."""
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            h.update(block)
    return h.hexdigest()


def read_ecsv(path):
    """An ECSV file as an astropy Table, parsed once and then kept in the disk cache.

    Parsing ECSV (YAML header, text columns) takes tenths of a second per
    file and pulls in astropy's YAML machinery (astropy.coordinates,
    astropy.time); the built-in registries and passband curves are read on
    every run, so their columns, units, descriptions, formats and metadata
    are stored as one entry keyed by the file's content.  A table the
    entry cannot hold (object columns, metadata that is not JSON) is simply
    read again each time.

    Parameters
    ----------
    path : path-like

    Returns
    -------
    astropy.table.Table
    """
    import json

    from astropy.table import Column, MaskedColumn, Table

    path = Path(path)
    key = digest("ecsv", file_digest(path))
    spilled = []

    def build():
        table = Table.read(path, format="ascii.ecsv")
        spilled.append(table)
        info, arrays = [], {}
        for i, name in enumerate(table.colnames):
            col = table[name]
            if col.dtype.kind == "O" or col.ndim != 1:
                return {}  # not storable without pickle: read it each time
            mask = np.ma.getmaskarray(col) if getattr(col, "mask", None) is not None else None
            arrays[f"c{i}"] = np.asarray(col.data if mask is not None else col)
            if mask is not None:
                arrays[f"m{i}"] = mask
            info.append({"name": name, "unit": None if col.unit is None else col.unit.to_string(),
                         "description": col.info.description, "format": col.info.format,
                         "masked": mask is not None})
        try:
            text = json.dumps({"columns": info, "meta": dict(table.meta)})
        except (TypeError, ValueError):
            return {}
        if json.loads(text)["meta"] != dict(table.meta):  # not JSON-exact (e.g. tuples): keep parsing
            return {}
        arrays["info"] = np.array(text)
        return arrays

    stored = load_or_build("ecsv", key, build)
    if spilled:  # built in this run: the parsed table itself
        return spilled[0]
    if "info" not in stored:
        return Table.read(path, format="ascii.ecsv")
    info = json.loads(str(stored["info"]))
    out = Table(meta=info["meta"])
    for i, c in enumerate(info["columns"]):
        kind = MaskedColumn if c["masked"] else Column
        extra = {"mask": stored[f"m{i}"]} if c["masked"] else {}
        out[c["name"]] = kind(stored[f"c{i}"], unit=c["unit"], description=c["description"],
                              format=c["format"], **extra)
    return out
