"""The one exception type stelltemp raises for bad input, and plain wording of system errors."""


class StelltempError(ValueError):
    """Bad input: the message is one line that names the problem.

    Parameters
    ----------
    message : str
        The line.
    parameter : str, optional
        The API parameter the message begins with (e.g. ``ebv_err``), so the
        command line can name the option the user typed instead
        (``--ebv-err``; see ``stelltemp.cli.for_people``).
    """

    def __init__(self, message="", parameter=None):
        super().__init__(message)
        self.parameter = parameter


class RenamedWarning(DeprecationWarning):
    """An old name (a passband key, an option) still works for one release; the message gives the new one."""


def shorten(text, limit=60):
    """`text` (any object) as one short line for a message: long text keeps its two ends.

    Examples
    --------
    >>> shorten("x" * 300, 20)
    'xxxxxxxxx…xxxxxxxxxx'
    """
    text = " ".join(str(text).split()) if text is not None else ""
    if len(text) <= limit:
        return text
    head = (limit - 1) // 2
    return text[:head] + "…" + text[len(text) - (limit - 1 - head):]


def decode_position(exc):
    """'line L, column C' of the first undecodable byte of a UnicodeDecodeError, and the byte."""
    data = exc.object if isinstance(exc.object, (bytes, bytearray)) else b""
    start = exc.start
    line = data.count(b"\n", 0, start) + 1
    column = start - (data.rfind(b"\n", 0, start) + 1) + 1
    byte = data[start] if start < len(data) else 0
    return f"line {line}, column {column}", f"0x{byte:02x}"


def plain_reason(exc):
    """A system or library exception as words for people (never the exception's class name).

    Examples
    --------
    >>> plain_reason(FileNotFoundError(2, "No such file or directory", "a.csv"))
    'a.csv: no such file or directory'
    >>> plain_reason(b"ok\\n\\xff".decode("utf-8", errors="strict") if False else UnicodeDecodeError(
    ...     "utf-8", b"ok\\n\\xff", 3, 4, "invalid start byte"))
    'not UTF-8 text (byte 0xff at line 2, column 1)'
    """
    if isinstance(exc, StelltempError):
        return str(exc)
    if isinstance(exc, UnicodeDecodeError):
        where, byte = decode_position(exc)
        return f"not UTF-8 text (byte {byte} at {where})"
    if isinstance(exc, UnicodeEncodeError):
        return f"the text {shorten(exc.object[exc.start:exc.end], 20)!r} cannot be written in {exc.encoding}"
    if isinstance(exc, OSError):
        reason = (exc.strerror or "cannot be used").lower() if exc.strerror else "cannot be used"
        return f"{shorten(exc.filename)}: {reason}" if exc.filename else reason
    if isinstance(exc, MemoryError):
        return "not enough memory for this request"
    if isinstance(exc, RecursionError):
        return "the input is nested too deeply"
    lines = str(exc).strip().splitlines()
    return shorten(lines[0], 200) if lines else "the value cannot be used"
