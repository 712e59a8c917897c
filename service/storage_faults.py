"""A full or unwritable data folder: told apart from other errors, answered clearly.

A write under ``data_dir`` fails with one of the POSIX error numbers of
:data:`STORAGE_ERRNOS` (IEEE Std 1003.1, ``<errno.h>``: ENOSPC no space left on the
device, EDQUOT disk quota exceeded, EROFS read-only file system, EACCES/EPERM
permission denied); the SQLite file in it fails with the primary result codes
SQLITE_FULL, SQLITE_READONLY, SQLITE_IOERR or SQLITE_CANTOPEN (sqlite.org/rescode.html).
A submission that meets one is answered 507 Insufficient Storage (RFC 4918, section
11.5) with ``Retry-After`` (RFC 9110, section 10.2.3) and nothing is kept; an analysis
that meets one while writing its output fails with :data:`FAILED_MESSAGE`.
"""

from __future__ import annotations

import errno
import logging
import os
import sqlite3
from collections.abc import Iterator
from contextlib import contextmanager

from .deps import ApiError

__all__ = [
    "FAILED_MESSAGE",
    "RETRY_AFTER_SECONDS",
    "STORAGE_ERRNOS",
    "describe",
    "is_storage_fault",
    "refuse_storage_faults",
    "storage_error",
]

log = logging.getLogger(__name__)

#: POSIX error numbers that mean "the data folder is full or not writable".
STORAGE_ERRNOS = frozenset({errno.ENOSPC, errno.EDQUOT, errno.EROFS, errno.EACCES, errno.EPERM})
#: SQLite primary result codes with the same meaning.
_SQLITE_CODES = frozenset({sqlite3.SQLITE_FULL, sqlite3.SQLITE_READONLY, sqlite3.SQLITE_IOERR,
                           sqlite3.SQLITE_CANTOPEN})
#: What a refused submission is told to wait before it tries again, s.
RETRY_AFTER_SECONDS = 60
_CLIENT_MESSAGE = ("the server's data folder is full or not writable, so the upload could not"
                   " be stored; nothing was kept. Retry later; if it persists, tell the"
                   " server's operator to free space in the data folder or fix its permissions")
#: The error of an analysis whose output could not be written.
FAILED_MESSAGE = ("the server's data folder is full or not writable ({reason}), so the results"
                  " could not be written and nothing was kept; submit the analysis again once"
                  " the operator has freed space in the data folder or fixed its permissions")


def is_storage_fault(err: BaseException) -> bool:
    """Whether ``err`` says the data folder (or its SQLite file) is full or not writable."""
    if isinstance(err, OSError):
        return err.errno in STORAGE_ERRNOS
    if isinstance(err, sqlite3.Error):
        code = getattr(err, "sqlite_errorcode", None)
        return isinstance(code, int) and code & 0xFF in _SQLITE_CODES
    return False


def describe(err: BaseException) -> str:
    """A short reason for people: the POSIX error text, or SQLite's message."""
    if isinstance(err, OSError) and err.errno is not None:
        return os.strerror(err.errno)
    return str(err) or type(err).__name__


def storage_error(err: BaseException) -> ApiError:
    """The 507 answer to a submission that met ``err`` (logged for the operator first)."""
    where = getattr(err, "filename", None)
    log.error("the data folder is full or not writable (%s%s); a request was answered 507",
              describe(err), f": {where}" if where else "")
    return ApiError(507, "storage_unavailable", _CLIENT_MESSAGE,
                    headers={"Retry-After": str(RETRY_AFTER_SECONDS)})


@contextmanager
def refuse_storage_faults() -> Iterator[None]:
    """Turn a storage fault raised inside into the 507 :class:`ApiError`; others pass."""
    try:
        yield
    except Exception as err:
        if not is_storage_fault(err):
            raise
        raise storage_error(err) from err
