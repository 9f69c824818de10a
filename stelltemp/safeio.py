"""Writing output files safely: never half-written, never replaced unless asked.

Every file stelltemp writes (tables, figures) goes first to a temporary file
in the target folder and is renamed into place when complete, so an
interrupted run leaves no partial file; an existing file is replaced only
with ``replace=True`` (the ``--replace`` option of the commands).
"""

import contextlib
import os
import tempfile
from pathlib import Path

from .errors import StelltempError

EXISTS_HINT = "already exists (allow replacing it explicitly, e.g. with --replace)"


def _umask():
    mask = os.umask(0)
    os.umask(mask)
    return mask


@contextlib.contextmanager
def atomic_path(path, overwrite=False):
    """Yield a temporary path beside ``path``; rename it to ``path`` on success.

    On any exception (including KeyboardInterrupt) the temporary file is
    removed and the target is left untouched.
    """
    path = Path(path)
    if path.exists() and not overwrite:
        raise StelltempError(f"{path}: {EXISTS_HINT}")
    if not (path.parent if str(path.parent) else Path(".")).is_dir():
        raise StelltempError(f"{path.parent}: no such folder")
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".part", dir=path.parent or ".")
    os.close(fd)
    try:
        yield Path(tmp)
        if path.exists() and not overwrite:  # appeared while we worked
            raise StelltempError(f"{path}: {EXISTS_HINT}")
        os.chmod(tmp, 0o666 & ~_umask())  # mkstemp makes 0600; give the usual mode
        os.replace(tmp, path)
    except BaseException:
        with contextlib.suppress(FileNotFoundError):
            os.unlink(tmp)
        raise


def save_figure(fig, path, replace=False, **savefig_options):
    """Write a matplotlib figure atomically; the format comes from the extension."""
    path = Path(path)
    fmt = path.suffix.lstrip(".").lower() or "png"
    try:
        with atomic_path(path, replace) as tmp:
            fig.savefig(tmp, format=fmt, **savefig_options)
    except (OSError, ValueError) as exc:
        raise StelltempError(f"cannot write figure {path}: {exc}") from None
    return str(path)


def save_table(table, path, fmt, replace=False):
    """Write an astropy table atomically in astropy format ``fmt``.

    Text columns held as Python str objects (dtype object, as the engine
    returns them) are written as fixed-width text, which every format takes.
    """
    texts = [n for n in table.colnames if getattr(table[n], "dtype", None) == object]
    if texts:
        table = table.copy(copy_data=False)
        for name in texts:
            table[name] = table[name].astype(str)
    try:
        with atomic_path(path, replace) as tmp:
            table.write(tmp, format=fmt, overwrite=True)
    except OSError as exc:
        raise StelltempError(f"cannot write {path}: {exc.strerror or exc}") from None
    return str(path)
