"""Writing output files safely: never half-written, never replaced unless asked.

Every file stelltemp writes (tables, figures) goes first to a temporary file
in the target folder and is renamed into place when complete, so an
interrupted run (Ctrl-C, or SIGTERM, which the command line turns into the
same interruption) leaves no partial file; an existing file is replaced only
with ``replace=True`` (the ``--replace`` option of the commands).

Temporary files are named ``.<name>.<pid>-<random>.stelltemp-part`` (the
name shortened so the whole stays within the file system's limit).  A run
killed outright (SIGKILL, power loss) cannot remove its own; the next write
into that folder finds them (their process is gone) and reports them, or
removes them when `leftover_mode` is ``"remove"`` (the command line's
``--sweep-leftovers``).

Every check that can refuse a path (`check_output_path`, `check_figure_path`)
is meant to run before any work starts.
"""

import contextlib
import contextvars
import os
import re
import secrets
from pathlib import Path

from .errors import StelltempError, shorten

EXISTS_HINT = "already exists (allow replacing it explicitly, e.g. with --replace)"
#: ending of every temporary file of ours
PART_SUFFIX = ".stelltemp-part"
_PART_RE = re.compile(r"^\..*\.(\d+)-[0-9a-f]{8}" + re.escape(PART_SUFFIX) + "$")
#: what to do with leftover temporary files found in an output folder: "report" or "remove"
_LEFTOVER_MODE = contextvars.ContextVar("stelltemp_leftover_mode", default="report")
#: (folder, file names, removed) found during the current command
_LEFTOVERS = contextvars.ContextVar("stelltemp_leftovers", default=None)


def _umask():
    mask = os.umask(0)
    os.umask(mask)
    return mask


def name_max(folder):
    """Longest file name (bytes) the file system of `folder` takes (255 when unknown)."""
    try:
        return int(os.pathconf(folder, "PC_NAME_MAX"))
    except (OSError, ValueError, AttributeError):
        return 255


def temporary_name(name, folder="."):
    """A hidden temporary name for `name` in `folder`, within the file system's name limit."""
    tail = f".{os.getpid()}-{secrets.token_hex(4)}{PART_SUFFIX}"
    room = name_max(folder) - len(tail) - 1
    stem = name.encode("utf-8")[: max(room, 1)].decode("utf-8", errors="ignore")
    return f".{stem}{tail}"


def check_output_path(path, overwrite=False, what="output"):
    """Refuse a path that cannot be written (before any work starts).

    Raises
    ------
    StelltempError
        The name is too long or empty, the folder is missing, the path is a
        folder, or the file exists and `overwrite` is False.
    """
    path = Path(path)
    folder = path.parent if str(path.parent) else Path(".")
    name = shorten(path, 160)
    if not path.name:
        raise StelltempError(f"cannot write {what} {name}: it needs a file name")
    if len(path.name.encode("utf-8")) > name_max(folder if folder.is_dir() else "."):
        raise StelltempError(f"cannot write {what} {name}: the file name is longer than the file system allows")
    try:
        if not folder.is_dir():
            raise StelltempError(f"cannot write {what} {name}: the folder {shorten(folder, 160)} does not exist")
        if path.is_dir():
            raise StelltempError(f"cannot write {what} {name}: it is a folder")
        if path.exists() and not overwrite:
            raise StelltempError(f"{name}: {EXISTS_HINT}")
    except OSError as exc:
        raise StelltempError(f"cannot write {what} {name}: {(exc.strerror or 'cannot be used').lower()}") from None
    if not os.access(folder, os.W_OK):
        raise StelltempError(f"cannot write {what} {name}: the folder {shorten(folder, 160)} is not writable")
    return path


def figure_formats():
    """File extensions matplotlib can write (lower case, no dot)."""
    from matplotlib.backend_bases import FigureCanvasBase

    return sorted(FigureCanvasBase.get_supported_filetypes())


def check_figure_path(path, overwrite=False):
    """`check_output_path` for a figure, plus a format matplotlib can write (from the extension)."""
    path = check_output_path(path, overwrite, what="figure")
    fmt = path.suffix.lstrip(".").lower()
    if fmt and fmt not in figure_formats():
        raise StelltempError(f"cannot write figure {shorten(path, 160)}: unknown figure format '.{shorten(fmt, 12)}' "
                             f"(use one of {', '.join('.' + f for f in figure_formats())})")
    return path


@contextlib.contextmanager
def leftover_mode(mode="report"):
    """Within the block, leftover temporary files are collected and reported or removed.

    Yields the list of ``(folder, names, removed)`` found, for the caller to report.
    """
    if mode not in ("report", "remove"):
        raise StelltempError(f"leftover mode must be 'report' or 'remove', got {mode!r}")
    found = []
    t1, t2 = _LEFTOVER_MODE.set(mode), _LEFTOVERS.set(found)
    try:
        yield found
    finally:
        _LEFTOVER_MODE.reset(t1)
        _LEFTOVERS.reset(t2)


def leftover_parts(folder):
    """Temporary files of ours in `folder` whose process is gone (sorted names)."""
    out = []
    try:
        names = os.listdir(folder)
    except OSError:
        return out
    for name in names:
        m = _PART_RE.match(name)
        if m and not _alive(int(m.group(1))):
            out.append(name)
    return sorted(out)


def _alive(pid):
    if pid == os.getpid():
        return True
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except (PermissionError, OverflowError, OSError):
        return True
    return True


def _handle_leftovers(folder):
    found = _LEFTOVERS.get()
    if found is None or any(f == str(folder) for f, _, _ in found):
        return
    names = leftover_parts(folder)
    if not names:
        return
    removed = _LEFTOVER_MODE.get() == "remove"
    if removed:
        for name in names:
            with contextlib.suppress(FileNotFoundError):
                os.unlink(os.path.join(folder, name))
    found.append((str(folder), names, removed))


def describe_leftovers(found):
    """One line per folder for the notes of a command (see `leftover_mode`)."""
    lines = []
    for folder, names, removed in found:
        if removed:
            lines.append(f"removed {len(names)} temporary file(s) left by interrupted runs in {shorten(folder)}")
        else:
            lines.append(f"{len(names)} temporary file(s) left by interrupted runs in {shorten(folder)} "
                         f"(e.g. {shorten(names[0], 50)}); remove them with --sweep-leftovers")
    return lines


@contextlib.contextmanager
def atomic_path(path, overwrite=False):
    """Yield a temporary path beside ``path``; rename it to ``path`` on success.

    On any exception (including KeyboardInterrupt) the temporary file is
    removed and the target is left untouched.
    """
    path = check_output_path(path, overwrite)
    folder = path.parent if str(path.parent) else Path(".")
    _handle_leftovers(folder)
    tmp = folder / temporary_name(path.name, folder)
    fd = os.open(tmp, os.O_CREAT | os.O_EXCL | os.O_WRONLY, 0o600)
    os.close(fd)
    try:
        yield tmp
        if path.exists() and not overwrite:  # appeared while we worked
            raise StelltempError(f"{shorten(path)}: {EXISTS_HINT}")
        os.chmod(tmp, 0o666 & ~_umask())  # created 0600; give the usual mode
        os.replace(tmp, path)
    except BaseException:
        with contextlib.suppress(FileNotFoundError):
            os.unlink(tmp)
        raise


@contextlib.contextmanager
def terminate_as_interrupt():
    """Within the block SIGTERM raises KeyboardInterrupt, so temporary files are removed as on Ctrl-C."""
    import signal
    import threading

    if threading.current_thread() is not threading.main_thread():
        yield
        return

    def _raise(signum, frame):
        raise KeyboardInterrupt

    try:
        previous = signal.signal(signal.SIGTERM, _raise)
    except (ValueError, OSError):  # not allowed here
        yield
        return
    try:
        yield
    finally:
        signal.signal(signal.SIGTERM, previous)


def save_figure(fig, path, replace=False, **savefig_options):
    """Write a matplotlib figure atomically; the format comes from the extension."""
    from .errors import plain_reason

    path = check_figure_path(path, replace)
    fmt = path.suffix.lstrip(".").lower() or "png"
    try:
        with atomic_path(path, replace) as tmp:
            fig.savefig(tmp, format=fmt, **savefig_options)
    except (OSError, ValueError) as exc:
        raise StelltempError(f"cannot write figure {shorten(path)}: {plain_reason(exc)}") from None
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
        raise StelltempError(f"cannot write {shorten(path)}: {(exc.strerror or 'write error').lower()}") from None
    return str(path)


def read_text_file(path, what):
    """The text of a UTF-8 file the user named, or one plain `StelltempError` line.

    Parameters
    ----------
    path : path-like
    what : str
        What the file is, for the message (e.g. ``"column map"``).

    Examples
    --------
    >>> read_text_file("/no/such/file.toml", "column map")
    Traceback (most recent call last):
    ...
    stelltemp.errors.StelltempError: cannot read column map /no/such/file.toml: no such file or directory
    """
    from .errors import decode_position, shorten

    name = shorten(path)
    try:
        data = Path(path).expanduser().read_bytes()
    except OSError as exc:
        raise StelltempError(f"cannot read {what} {name}: {(exc.strerror or 'read error').lower()}") from None
    try:
        return data.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        where, byte = decode_position(exc)
        raise StelltempError(f"{what} {name}: {where}: not UTF-8 text (byte {byte})") from None
