"""Checks that several detectors' inputs can be analysed together as one network.

Each failed check raises an :class:`~estimator.errors.InputError` that names the detector
and carries a ``field`` a form can show the message beside:

* ``"detectors"``: no detector at all;
* ``"detector:NAME"``: the name itself (given twice, not a known site, not the segment's);
* ``"detector:NAME:strain"``: the segment (sample rate, time span);
* ``"detector:NAME:psd"``: the noise spectrum (given for some detectors only);
* ``"trigger_time"``: the trigger time is not a finite number.

The checks that need the analysis band (Nyquist frequency, spectrum coverage, segment
length) are those of :func:`estimator.validation.check_analysis_inputs`, run per detector.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from typing import NoReturn, Protocol

import numpy as np
from numpy.typing import NDArray

from .data import NoiseSpectrum, StrainSegment
from .errors import InputError

__all__ = ["RATE_TOLERANCE", "NetworkInputLike", "check_network_inputs", "max_site_delay"]

#: Relative difference below which two sample rates count as the same.
RATE_TOLERANCE = 1e-9
_C_LIGHT = 299_792_458.0  # m/s, exact by the SI definition of the metre


class _SiteLike(Protocol):
    @property
    def name(self) -> str: ...

    @property
    def position(self) -> NDArray[np.float64]: ...


class NetworkInputLike(Protocol):
    """What the checks read of one detector's input (see ``network_analysis.DetectorInput``)."""

    @property
    def site(self) -> _SiteLike: ...

    @property
    def segment(self) -> StrainSegment: ...

    @property
    def spectrum(self) -> NoiseSpectrum | None: ...


def _fail(message: str, field: str) -> NoReturn:
    raise InputError(message, field=field)


def max_site_delay(positions: Sequence[NDArray[np.float64]]) -> float:
    """Largest possible arrival delay from the geocentre at any of the sites, s.

    The delay of a site at Earth-fixed position ``r`` is ``-(r . n) / c`` for a source in
    the unit direction ``n`` (Anderson, Brady, Creighton & Flanagan 2001, PRD 63, 042003,
    Appendix B; from memory); by the Cauchy-Schwarz inequality ``|r . n| <= |r|``, so
    ``max |r| / c`` bounds it over the whole sky (about 21.3 ms on the Earth's surface).
    """
    return max((float(np.linalg.norm(r)) / _C_LIGHT for r in positions), default=0.0)


def _gps(t: float) -> str:
    return f"{t:.6f}"


def check_network_inputs(
    inputs: Sequence[NetworkInputLike],
    *,
    trigger_time: float,
    time_window: float = 0.1,
    edge_margin: float = 1.0,
    known_sites: Mapping[str, object] | None = None,
) -> None:
    """Raise when the detectors' inputs cannot be analysed together.

    Checks, in this order:

    * at least one detector;
    * every detector's name appears once, is the name its segment carries and, when
      ``known_sites`` is given, is one of them (the message lists the known sites);
    * a noise spectrum for every detector or for none (the ones without are named);
    * one common sample rate (both detectors and both rates named; within
      ``RATE_TOLERANCE`` relative);
    * the segments overlap, and their common span holds the trigger time with
      ``edge_margin + time_window + max_delay`` on both sides, ``max_delay`` the largest
      arrival delay from the geocentre at any of the sites (:func:`max_site_delay`):
      the trigger time is a geocentre time and each site sees the signal up to that
      much earlier or later. ``edge_margin`` keeps the searched times off the tapered
      ends, as in :func:`estimator.validation.check_analysis_inputs`.

    Parameters
    ----------
    inputs
        One input per detector: ``site`` (``name``, Earth-fixed ``position`` in m),
        ``segment`` and ``spectrum`` (``None``: estimated from the segment).
    trigger_time
        GPS time of the candidate at the geocentre, s.
    time_window
        Half-width of the searched coalescence-time range around the trigger, s.
    edge_margin
        Extra distance, s, kept from the ends of the common span.
    known_sites
        The sites a detector name may refer to (a site file's, or the shipped ones);
        ``None`` skips that check.

    Raises
    ------
    InputError
        With ``field`` ``"detectors"``, ``"detector:NAME"``, ``"detector:NAME:strain"``,
        ``"detector:NAME:psd"`` or ``"trigger_time"``, naming the detector(s).
    """
    if len(inputs) < 1:
        _fail("no detector given; give at least one detector's strain", "detectors")
    for key, value in (("time_window", time_window), ("edge_margin", edge_margin)):
        if not (math.isfinite(value) and value >= 0):
            _fail(f"{key} = {value} s is not a number >= 0", "trigger_time")
    if not math.isfinite(trigger_time):
        _fail(f"trigger_time = {trigger_time} is not a finite GPS time", "trigger_time")
    names = [item.site.name for item in inputs]
    _check_names(inputs, names, known_sites)
    _check_spectra(inputs, names)
    _check_rates(inputs, names)
    _check_spans(inputs, names, trigger_time, edge_margin + time_window)


def _check_names(
    inputs: Sequence[NetworkInputLike], names: list[str], known: Mapping[str, object] | None
) -> None:
    seen: set[str] = set()
    for item, name in zip(inputs, names, strict=True):
        if name in seen:
            _fail(
                f"detector {name!r} is given twice; give each detector once (one strain "
                "file per detector)",
                f"detector:{name}",
            )
        seen.add(name)
        if known is not None and name not in known:
            listed = ", ".join(sorted(known)) or "none"
            _fail(
                f"detector {name!r} is not a known site (known: {listed}); use one of "
                "those names or give a site file that describes it",
                f"detector:{name}",
            )
        if item.segment.detector != name:
            _fail(
                f"detector {name!r} was given the segment of {item.segment.detector!r} "
                f"({item.segment.source}); pair each strain file with its own detector",
                f"detector:{name}",
            )


def _check_spectra(inputs: Sequence[NetworkInputLike], names: list[str]) -> None:
    given = [n for item, n in zip(inputs, names, strict=True) if item.spectrum is not None]
    if not given or len(given) == len(names):
        return
    without = [n for n in names if n not in given]
    _fail(
        f"a noise spectrum is given for {', '.join(given)} but not for {', '.join(without)}; "
        "give a PSD for every detector, or for none (all then estimated from the data)",
        f"detector:{without[0]}:psd",
    )


def _check_rates(inputs: Sequence[NetworkInputLike], names: list[str]) -> None:
    first, rate = names[0], inputs[0].segment.sample_rate
    for item, name in zip(inputs[1:], names[1:], strict=True):
        other = item.segment.sample_rate
        if abs(other - rate) > RATE_TOLERANCE * rate:
            _fail(
                f"detector {name!r} is sampled at {other:.9g} Hz and detector {first!r} at "
                f"{rate:.9g} Hz; every detector needs the same sample rate: resample "
                f"{name!r} to {rate:.9g} Hz (or all detectors to one common rate)",
                f"detector:{name}:strain",
            )


def _check_spans(
    inputs: Sequence[NetworkInputLike], names: list[str], trigger_time: float, clearance: float
) -> None:
    starts = [item.segment.start_time for item in inputs]
    ends = [item.segment.end_time for item in inputs]
    late, early = int(np.argmax(starts)), int(np.argmin(ends))
    start, end = starts[late], ends[early]
    if end <= start:
        _fail(
            f"the segments of detectors {names[early]!r} ([{_gps(starts[early])}, "
            f"{_gps(end)}] s) and {names[late]!r} ([{_gps(start)}, {_gps(ends[late])}] s) do "
            "not overlap; supply segments that cover the same time around the trigger",
            f"detector:{names[late]}:strain",
        )
    delay = max_site_delay([item.site.position for item in inputs])
    need = clearance + delay
    what = (
        f"at least {need:.4g} s is needed on both sides (edge margin + time window "
        f"{clearance:g} s + largest site delay {1e3 * delay:.1f} ms)"
    )
    if trigger_time - start < need:
        gap = f"{trigger_time - start:.4g} s after" if trigger_time >= start else "before"
        _fail(
            f"trigger time {_gps(trigger_time)} s is {gap} the start of detector "
            f"{names[late]!r}'s segment ({_gps(start)} s); {what}; supply a segment that "
            "starts earlier",
            f"detector:{names[late]}:strain",
        )
    if end - trigger_time < need:
        gap = f"{end - trigger_time:.4g} s before" if trigger_time <= end else "after"
        _fail(
            f"trigger time {_gps(trigger_time)} s is {gap} the end of detector "
            f"{names[early]!r}'s segment ({_gps(end)} s); {what}; supply a segment that "
            "ends later",
            f"detector:{names[early]}:strain",
        )
