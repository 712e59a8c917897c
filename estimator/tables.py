"""Parsing numeric text tables from bytes already read (files are opened in
:mod:`estimator.io` only).

Comma, semicolon, tab or space delimited (runs of delimiters count as one); ``#``,
``%`` and ``//`` comment lines and blank lines skipped anywhere; one header line
recognised; a UTF-8 byte-order mark and CR or CRLF line ends accepted. Every problem
is raised as an :class:`~estimator.errors.InputError` naming the file, the line
(counted in the original file, comments included) and what was expected.
"""

from __future__ import annotations

from typing import NoReturn

import numpy as np
from numpy.typing import NDArray

from .errors import InputError

__all__ = ["parse_table"]

Array = NDArray[np.float64]
Lines = NDArray[np.int64]
_SPACE, _NEWLINE = 32, 10
_TO_SPACE = bytes.maketrans(b",;\t\x0b\x0c", b"     ")


def _fail(message: str, name: str, field: str, where: str | None = None) -> NoReturn:
    raise InputError(message, source=name, where=where, field=field)


def _is_number(token: bytes) -> bool:
    try:
        float(token)
    except ValueError:
        return False
    return True


def parse_table(
    raw: bytes, *, source: str, field: str, allowed: tuple[int, ...], expected: str
) -> tuple[Array, Lines]:
    """Parse a numeric text table into ``(values (n, k), line_numbers (n,))``.

    Line splitting, comment detection and column counting are vectorised over the
    file's bytes; only the number conversion runs per value, with Python's
    correctly rounded ``float``, so values written with 17 significant digits read
    back exactly. Runs of delimiters count as one.

    Parameters
    ----------
    raw
        The file's bytes.
    source
        File name for error messages.
    field
        ``field`` of the :class:`~estimator.errors.InputError` raised (``"strain"``...).
    allowed
        Accepted numbers of columns; every data line must have as many as the first.
    expected
        What the columns hold, for error messages (``"frequency (Hz) and PSD (1/Hz)"``).

    Returns
    -------
    ``values`` of shape ``(n, k)``, all finite, and the 1-based line number in the
    file of each of the ``n`` data lines.

    Raises
    ------
    InputError
        For binary content, no data lines, a wrong column count, a token that is not
        a number or a value that is not finite, naming the line.
    """
    if b"\x00" in raw:
        _fail("the file looks binary; expected a text table, a .npy or a .npz file", source, field)
    raw = raw.removeprefix(b"\xef\xbb\xbf")
    if b"\r" in raw:
        raw = raw.replace(b"\r\n", b"\n").replace(b"\r", b"\n")
    text = bytearray(raw.translate(_TO_SPACE))  # every delimiter becomes a space
    buf = np.frombuffer(text, dtype=np.uint8)
    newlines = np.flatnonzero(buf == _NEWLINE)
    starts = np.concatenate(([0], newlines + 1))
    ends = np.concatenate((newlines, [buf.size]))
    solid = (buf != _SPACE) & (buf != _NEWLINE)
    tokens = np.flatnonzero(solid[1:] > solid[:-1]) + 1  # first byte of every token
    if solid.size and solid[0]:
        tokens = np.concatenate(([0], tokens))
    nodata = f"no data lines (only comments, blank lines or a header); expected {expected}"
    if tokens.size == 0:
        _fail(nodata, source, field)
    line_of = np.searchsorted(newlines, tokens)
    counts = np.bincount(line_of, minlength=starts.size)
    first = tokens[np.minimum(np.searchsorted(line_of, np.arange(starts.size)), tokens.size - 1)]
    c0, c1 = buf[first], buf[np.minimum(first + 1, buf.size - 1)]
    comment = (counts > 0) & ((c0 == 35) | (c0 == 37) | ((c0 == 47) & (c1 == 47)))  # # % //
    data, ignored = np.flatnonzero((counts > 0) & ~comment), np.flatnonzero(comment)

    def line(i: np.integer | int) -> bytes:
        return bytes(text[starts[i] : ends[i]])

    if data.size and not any(_is_number(t) for t in line(data[0]).split()):
        ignored, data = np.sort(np.append(ignored, data[0])), data[1:]  # the header line
    if data.size == 0:
        _fail(nodata, source, field)
    for i in ignored:  # blank out comments and the header so that only numbers remain
        text[starts[i] : ends[i]] = b" " * int(ends[i] - starts[i])
    counts = counts[data]
    ncols = int(counts[0])
    wrong = np.flatnonzero(counts != ncols) if ncols in allowed else np.zeros(1, np.int64)
    if wrong.size:
        i = data[wrong[0]]
        want = f"{ncols} like the first data line (line {data[0] + 1})"
        if ncols not in allowed:
            want = " or ".join(map(str, allowed))
        hint = "; decimal commas are not supported" if b";" in raw[starts[i] : ends[i]] else ""
        msg = f"{counts[wrong[0]]} columns found, expected {want} ({expected}){hint}"
        _fail(msg, source, field, f"line {i + 1}")
    try:
        flat = np.fromiter(map(float, bytes(text).split()), np.float64, data.size * ncols)
    except ValueError:  # find the first bad token for the message
        i, token = next((i, t) for i in data for t in line(i).split() if not _is_number(t))
        msg = f"'{token.decode('utf-8', 'replace')}' is not a number; expected {expected}"
        _fail(msg, source, field, f"line {i + 1}")
    values = flat.reshape(data.size, ncols)
    bad = np.argwhere(~np.isfinite(values))
    if bad.size:
        r, c = bad[0]
        msg = f"value {values[r, c]} in column {c + 1} is not finite; expected {expected}"
        _fail(msg, source, field, f"line {data[r] + 1}")
    return values, (data + 1).astype(np.int64)
