"""Reading strain segments and noise spectra from files: the library's only file reader.

Text tables (comma, semicolon, tab or space delimited; ``#``, ``%`` and ``//`` comment
lines and blank lines skipped anywhere; one header line recognised; parsed by
:func:`estimator.tables.parse_table`), NumPy ``.npy`` arrays and ``.npz`` archives.
Every problem is raised as an :class:`~estimator.errors.InputError` naming the file,
the line (counted in the original file, comments included) and what was expected.
"""

from __future__ import annotations

import hashlib
import io
import json
import re
import tomllib
from pathlib import Path
from typing import NoReturn

import numpy as np
from numpy.typing import NDArray

from .data import NoiseSpectrum, StrainSegment
from .errors import InputError
from .sites import Site, site_from_mapping
from .tables import parse_table

__all__ = [
    "MAX_CALIBRATED_STRAIN",
    "RATE_SNAP_TOLERANCE",
    "read_psd",
    "read_site_file",
    "read_strain",
    "sha256_file",
]

#: Largest |h| accepted as calibrated strain; detector noise is near 1e-21 (common practice).
MAX_CALIBRATED_STRAIN = 1e-15
#: Relative distance from an integer within which an inferred sample rate is snapped to it.
RATE_SNAP_TOLERANCE = 1e-6

Array = NDArray[np.float64]
Lines = NDArray[np.int64]
Given = tuple[float | None, float | None]
_STRAIN_COLUMNS = "strain, or GPS time (s) and strain"


def _fail(message: str, name: str, field: str, where: str | None = None) -> NoReturn:
    raise InputError(message, source=name, where=where, field=field)


def sha256_file(path: str | Path) -> str:
    """Hex SHA-256 digest (FIPS 180-4) of a file's bytes, for provenance records."""
    p = Path(path)
    try:
        with p.open("rb") as handle:
            return hashlib.file_digest(handle, "sha256").hexdigest()
    except OSError as err:
        raise InputError(f"cannot read the file ({err.strerror or err})", source=p.name) from err


def _read_bytes(path: Path, field: str) -> bytes:
    try:
        raw = path.read_bytes()
    except OSError as err:
        msg = f"cannot read the file ({err.strerror or err}); check the path and permissions"
        raise InputError(msg, source=path.name, field=field) from err
    if not raw or raw.isspace():
        _fail("the file is empty", path.name, field)
    return raw


def _time_grid(times: Array, lines: Lines, name: str, tolerance: float) -> tuple[float, float]:
    """Sample rate and start time of a column of GPS time stamps.

    The rate is inferred from the whole span, ``fs = (n - 1) / (t[n-1] - t[0])`` (the
    definition of a uniform grid), so that stamps written with limited precision (to
    the microsecond, say) still give the right rate; it is then snapped to the nearest
    integer number of hertz when within ``RATE_SNAP_TOLERANCE`` (1e-6) relative. Each
    step may differ from the median step by less than ``2 * tolerance`` steps and each stamp
    from the grid ``t0 + i/fs`` by less than ``tolerance`` steps; ``t0`` is the first
    stamp corrected by the median deviation from the grid. Microsecond rounding moves
    the span by at most 1e-6 s, so the snap recovers the integer rate for spans of a
    second or more.
    """
    step = np.diff(times)
    if (step <= 0).any():
        i = int(np.argmax(step <= 0)) + 1
        msg = (
            f"time stamp {times[i]:.6f} s is not later than the one before "
            f"({times[i - 1]:.6f} s, line {lines[i - 1]}); time stamps must increase"
        )
        _fail(msg, name, "strain", f"line {lines[i]}")
    rate = (times.size - 1) / (times[-1] - times[0])
    if round(rate) > 0 and abs(rate - round(rate)) <= RATE_SNAP_TOLERANCE * rate:
        rate = float(round(rate))
    need = f"the segment must be uniformly sampled without gaps (tolerance {tolerance:g} step)"
    typical = float(np.median(step))
    off_step = np.flatnonzero(np.abs(step / typical - 1.0) > 2.0 * tolerance)
    if off_step.size:
        i = int(off_step[0]) + 1
        msg = f"time step {step[i - 1]:.6g} s differs from {typical:.6g} s; {need}"
        _fail(msg, name, "strain", f"line {lines[i]}")
    residual = (times - times[0]) * rate - np.arange(times.size)
    offset = float(np.median(residual))
    drift = np.flatnonzero(np.abs(residual - offset) > tolerance)
    if drift.size:
        i = int(drift[0])
        msg = (
            f"time stamp {times[i]:.6f} s is {residual[i] - offset:+.3f} step off the grid "
            f"of {rate:.9g} Hz; {need}"
        )
        _fail(msg, name, "strain", f"line {lines[i]}")
    return float(rate), float(times[0] + offset / rate)


def _check_grid(name: str, rate: float | None, start: float | None, what: str = "") -> None:
    """Reject a sample rate that is not a positive number or a start time that is not finite."""
    if rate is not None and not (np.isfinite(rate) and rate > 0):
        msg = f"{what}sample rate {rate} Hz is not a positive number (--sample-rate)"
        _fail(msg, name, "strain")
    if start is not None and not np.isfinite(start):
        _fail(f"{what}start time {start} s is not a finite GPS time (--start-time)", name, "strain")


def _reconcile(name: str, found: tuple[float, float], given: Given, tolerance: float) -> None:
    """Raise when a sample rate or start time given as an option disagrees with the file."""
    limits = (RATE_SNAP_TOLERANCE * found[0], tolerance / found[0])
    for label, unit, value, seen, limit in zip(
        ("sample rate", "start time"), ("Hz", "s"), given, found, limits, strict=True
    ):
        if value is not None and abs(value - seen) > limit:
            msg = (
                f"the {label} given ({value:.9g} {unit}) disagrees with the file ({seen:.9g} "
                f"{unit}); leave it out for a file that states its own, or correct it"
            )
            _fail(msg, name, "strain")


def _as_strain(a: NDArray[np.generic], name: str, what: str) -> Array:
    if a.ndim != 1 or a.dtype.kind not in "iuf":
        msg = f"{what} has shape {a.shape} and type {a.dtype}, expected a 1-D real array of strain"
        _fail(msg, name, "strain")
    return np.asarray(a, dtype=np.float64)


def _load_numpy(raw: bytes, name: str) -> tuple[Array, tuple[float, float] | None]:
    """Strain from a ``.npy`` array, or strain, sample rate and start time from a ``.npz``."""
    keys = ("strain", "sample_rate", "start_time")
    expected = "a 1-D .npy array, or a .npz with 'strain', 'sample_rate' and 'start_time'"
    try:
        loaded = np.load(io.BytesIO(raw), allow_pickle=False)
        if isinstance(loaded, np.ndarray):
            return _as_strain(loaded, name, "the array"), None
        with loaded as archive:
            missing = [k for k in keys if k not in archive.files]
            if missing:
                found = ", ".join(archive.files) or "nothing"
                msg = f"no '{missing[0]}' in the archive (found {found}); expected {expected}"
                _fail(msg, name, "strain")
            arrays = [np.asarray(archive[k]) for k in keys]
    except InputError:
        raise
    except Exception as err:  # corrupt bytes raise many kinds (zlib.error, TokenError, ...)
        msg = f"cannot read the NumPy data ({err}); expected {expected}"
        raise InputError(msg, source=name, field="strain") from err
    for key, a in zip(keys[1:], arrays[1:], strict=True):
        if a.size != 1 or a.ndim > 1 or a.dtype.kind not in "iuf":
            msg = f"'{key}' has shape {a.shape} and type {a.dtype}, expected a real scalar"
            _fail(msg, name, "strain")
    grid = (float(arrays[1].reshape(())), float(arrays[2].reshape(())))
    _check_grid(name, *grid, what="the archive's ")
    return _as_strain(arrays[0], name, "'strain'"), grid


def _check_strain(strain: Array, name: str, lines: Lines | None) -> None:
    """Reject too-short, non-finite or uncalibrated strain (``|h| > MAX_CALIBRATED_STRAIN``)."""
    if strain.size < 2:
        _fail(f"only {strain.size} strain sample found, expected at least 2", name, "strain")
    finite = np.isfinite(strain)
    i = int(np.argmin(finite)) if not finite.all() else int(np.argmax(np.abs(strain)))
    place = f"line {lines[i]}" if lines is not None else f"index {i}"
    if not finite[i]:
        _fail(f"strain value {strain[i]} is not finite", name, "strain", place)
    if abs(strain[i]) > MAX_CALIBRATED_STRAIN:
        msg = (
            f"strain values look uncalibrated: max |h| = {abs(strain[i]):.2g} at {place}, "
            f"expected |h| < {MAX_CALIBRATED_STRAIN:g} for calibrated strain; "
            "supply dimensionless strain, not detector counts or scaled values"
        )
        _fail(msg, name, "strain")


def read_strain(
    path: str | Path,
    *,
    sample_rate: float | None = None,
    start_time: float | None = None,
    detector: str = "detector-1",
    jitter_tolerance: float = 0.1,
) -> StrainSegment:
    """Read a calibrated strain segment from a text table, a ``.npy`` or a ``.npz`` file.

    Parameters
    ----------
    path
        Text with two columns (GPS time in s, strain) or one (strain); a ``.npy``
        1-D array of strain; or a ``.npz`` archive with ``strain`` (1-D),
        ``sample_rate`` (Hz) and ``start_time`` (GPS s). The format is recognised
        from the content, not the name. Any length of at least 2 samples.
    sample_rate, start_time
        Needed for one-column text and ``.npy`` input. For a file that states its
        own (two columns, ``.npz``) they are optional checks: a value that
        disagrees (rate beyond 1e-6 relative, start beyond ``jitter_tolerance`` of a
        step) is an error, never silently overridden.
    detector
        Our own label for the detector (``"site-A"``).
    jitter_tolerance
        Largest accepted deviation of a time stamp from the uniform grid, as a
        fraction of a sample step, in (0, 0.5). The rate is inferred from the whole
        span and snapped to an integer number of hertz within 1e-6 relative (see
        ``_time_grid``), so microsecond-rounded GPS stamps give exactly 4096 Hz.

    Raises
    ------
    InputError
        With ``field="strain"``, naming the file, the line and what was expected.
    """
    p = Path(path)
    name, given, lines = p.name, (sample_rate, start_time), None
    _check_grid(name, sample_rate, start_time)
    if not 0.0 < jitter_tolerance < 0.5:
        _fail(f"jitter tolerance {jitter_tolerance} is outside (0, 0.5) step", name, "strain")
    raw = _read_bytes(p, "strain")
    numpy_file = raw.startswith((b"\x93NUMPY", b"PK\x03\x04"))
    if not numpy_file and p.suffix.lower() in {".npy", ".npz"}:
        # The NumPy format's magic string and the zip local-header signature (PKWARE
        # APPNOTE 4.3.7) open every .npy and .npz file.
        kind = "NumPy array (.npy)" if p.suffix.lower() == ".npy" else "NumPy archive (.npz)"
        _fail(f"named like a {kind} but does not start like one; the file is damaged or in"
              " another format: write it with numpy.save / numpy.savez, or send a text table",
              name, "strain")
    if numpy_file:
        strain, grid = _load_numpy(raw, name)
        what = "a .npy strain array"
    else:
        values, lines = parse_table(
            raw, source=name, field="strain", allowed=(1, 2), expected=_STRAIN_COLUMNS
        )
        strain, grid, what = values[:, -1], None, "one-column strain"
        if values.shape[1] == 2:
            _check_strain(strain[:2], name, lines)  # at least two samples to make a grid of
            grid = _time_grid(values[:, 0], lines, name, jitter_tolerance)
    if grid is None:
        if sample_rate is None or start_time is None:
            msg = f"{what} needs a sample rate and a start time (--sample-rate, --start-time)"
            _fail(msg, name, "strain")
        grid = (float(sample_rate), float(start_time))
    _reconcile(name, grid, given, jitter_tolerance)
    _check_strain(strain, name, lines)
    return StrainSegment(strain=np.ascontiguousarray(strain), sample_rate=grid[0],
                         start_time=grid[1], source=name, detector=detector)  # fmt: skip


def read_psd(path: str | Path, *, asd: bool = False) -> NoiseSpectrum:
    """Read a one-sided noise spectrum from a two-column text table.

    Parameters
    ----------
    path
        Columns: frequency (Hz, >= 0, strictly increasing) and the one-sided PSD
        (1/Hz, > 0); comments, blank lines and a header as for :func:`read_strain`.
    asd
        The second column is an amplitude spectral density (1/sqrt(Hz)), squared
        on reading: ``S(f) = ASD(f)^2`` (the definition of the ASD).

    Raises
    ------
    InputError
        With ``field="psd"``, naming the file, the line and the offending value.
    """
    p = Path(path)
    name = p.name
    unit = "ASD (1/sqrt(Hz))" if asd else "PSD (1/Hz)"
    raw = _read_bytes(p, "psd")
    values, lines = parse_table(
        raw, source=name, field="psd", allowed=(2,), expected=f"frequency (Hz) and {unit}"
    )
    freq, density = values[:, 0], values[:, 1]
    if freq.size < 2:
        _fail("only 1 frequency found, expected at least 2", name, "psd")
    steps = np.concatenate(([1.0], np.diff(freq)))
    for mask, text in (
        (freq < 0, "frequency {f:g} Hz is negative; expected frequencies >= 0 Hz"),
        (
            steps <= 0,
            "frequency {f:g} Hz is not above the one before ({g:g} Hz, line {m}); "
            "frequencies must increase strictly",
        ),
        (
            density <= 0,
            unit[:3] + " value {d:g} at {f:g} Hz is not positive; "
            "a noise spectrum must be positive at every frequency",
        ),
    ):
        if mask.any():
            i = int(np.argmax(mask))
            msg = text.format(f=freq[i], g=freq[i - 1], m=lines[i - 1], d=density[i])
            _fail(msg, name, "psd", f"line {lines[i]}")
    notes = ("amplitude spectral density from the file, squared",) if asd else ()
    return NoiseSpectrum(
        frequencies=freq.copy(), psd=density**2 if asd else density.copy(), source=name, notes=notes
    )


def _unique_keys(pairs: list[tuple[str, object]]) -> dict[str, object]:
    """JSON object hook: a repeated key is an error rather than a silent overwrite."""
    table: dict[str, object] = {}
    for key, value in pairs:
        if key in table:
            msg = f"the key {key!r} appears twice in one object; give each site and field once"
            raise ValueError(msg)
        table[key] = value
    return table


def read_site_file(path: str | Path) -> dict[str, Site]:
    """Read detector sites from a site file (TOML or JSON, chosen by the suffix).

    Layout (our own): one table per site under ``site``: ``[site.NAME]`` in TOML
    (TOML 1.0, read by :mod:`tomllib`), ``{"site": {"NAME": {...}}}`` in JSON (RFC 8259),
    each with the fields of :func:`estimator.sites.site_from_mapping` (``latitude_deg``,
    ``longitude_deg``, ``elevation_m``, ``arm1_azimuth_deg``, ``arm2_azimuth_deg`` and the
    optional ``arm1_tilt_deg``, ``arm2_tilt_deg``).

    Returns
    -------
    dict
        The sites by name, in file order.

    Raises
    ------
    InputError
        ``field="sites"`` for a suffix other than ``.toml``/``.json``, an unreadable,
        empty or unparsable file (with the parser's line and column), another top-level
        key or no sites; ``field="site:NAME:FIELD"`` for a bad site (see
        :func:`~estimator.sites.site_from_mapping`).
    """
    p = Path(path)
    name, suffix = p.name, p.suffix.lower()
    if suffix not in (".toml", ".json"):
        _fail(f"site-file suffix {p.suffix!r} is not known; use .toml or .json", name, "sites")
    raw = _read_bytes(p, "sites")
    try:
        text = raw.decode("utf-8")
        if suffix == ".toml":
            document: object = tomllib.loads(text)
        else:
            document = json.loads(text, object_pairs_hook=_unique_keys)
    except UnicodeDecodeError as err:
        msg = f"byte {err.start} is not UTF-8 text; save the file as UTF-8"
        raise InputError(msg, source=name, field="sites") from err
    except tomllib.TOMLDecodeError as err:
        found = re.search(r"line (\d+), column (\d+)", str(err))
        where = f"line {found[1]}, column {found[2]}" if found else None
        msg = f"cannot parse the TOML ({err}); correct the syntax there"
        raise InputError(msg, source=name, where=where, field="sites") from err
    except json.JSONDecodeError as err:
        msg = f"cannot parse the JSON ({err.msg}); correct the syntax there"
        where = f"line {err.lineno}, column {err.colno}"
        raise InputError(msg, source=name, where=where, field="sites") from err
    except ValueError as err:  # a repeated JSON key
        raise InputError(str(err), source=name, field="sites") from err
    layout = 'one table per site: [site.NAME] in TOML, {"site": {"NAME": {...}}} in JSON'
    if not isinstance(document, dict):
        _fail(f"found a JSON {type(document).__name__}, expected {layout}", name, "sites")
    others = ", ".join(repr(str(k)) for k in document if k != "site")
    if others:
        _fail(f"unknown top-level key(s) {others}; expected only 'site', {layout}", name, "sites")
    tables = document.get("site", {})
    if not isinstance(tables, dict):
        _fail(f"'site' holds a {type(tables).__name__}, expected {layout}", name, "sites")
    if not tables:
        _fail(f"no sites found; expected {layout}", name, "sites")
    return {str(k): site_from_mapping(str(k), v, source=name) for k, v in tables.items()}
