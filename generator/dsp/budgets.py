"""Budgets of shared hardware: data rates, containers, utilisation, scan skew, clock division,
storage, and the relative phase of two analog filters.

References
----------
[IEC60908] IEC 60908, CD digital audio: the payload of a PCM stream is fs x N x channels.
[DER]      Derived here: plain arithmetic on rates, bits, bytes and time (units stated per function).
[CP]       Common practice: a multiplexed converter spreads its conversions evenly over the scan, so
           neighbouring slots are 1 / (aggregate rate) apart; a delta-sigma modulator clock is an
           integer division of the master clock (MCLK / N), and the output rate is the modulator
           rate over an integer oversampling ratio.
[WT]       Williams & Taylor, *Electronic Filter Design Handbook*: phase and group delay of a
           rational transfer function (computed in :mod:`generator.dsp.filters`).
[1241]     IEEE Std 1241-2010; W. Kester, Analog Devices MT-001: LSB = FSR / 2^N.
"""

from __future__ import annotations

import math
from collections.abc import Sequence

from . import filters
from .filters import AnalogFilter

BITS_PER_BYTE = 8


def payload_rate(rate_hz: float, bits: int, channels: int = 1) -> float:
    """Useful bits per second of a PCM stream: R = fs x N x channels, bit/s [IEC60908].

    CD-DA: 44.1 kHz x 16 bit x 2 = 1,411,200 bit/s.
    """
    return rate_hz * bits * channels


def stream_rate(rate_hz: float, container_bits: int, channels: int = 1) -> float:
    """Bits per second as carried and stored, each sample in its container: fs x C x channels [DER]."""
    return rate_hz * container_bits * channels


def container_efficiency(bits: int, container_bits: int) -> float:
    """Share of a container holding data: eta = N / C (24 bits in 32: 0.75) [DER]."""
    return bits / container_bits


def container_overhead(bits: int, container_bits: int) -> float:
    """Extra bits per useful bit: (C - N) / N (24 bits in 32: +33.3 %) [DER]."""
    return (container_bits - bits) / bits


def link_load(data_rate_bps: float, overhead: float) -> float:
    """Bits per second on the wire: data rate x (1 + overhead), overhead a ratio (8 % -> 0.08) [DER]."""
    return data_rate_bps * (1.0 + overhead)


def usable_capacity(capacity: float, headroom: float) -> float:
    """Capacity left for traffic once the headroom is kept free: C x (1 - headroom) [DER]."""
    return capacity * (1.0 - headroom)


def utilisation(load: float, capacity: float) -> float:
    """Load as a share of capacity, U = load / capacity (1.28 = 128 %); infinite on a zero capacity [DER]."""
    if capacity <= 0.0:
        return math.inf if load > 0.0 else 0.0
    return load / capacity


def scan_skew(slot: int, aggregate_rate_hz: float) -> float:
    """Time between the first slot of a multiplexer scan and slot ``slot``: t_k = k / R_agg, seconds [CP].

    ``aggregate_rate_hz`` is the sum of the rates of every channel the converter scans.
    """
    return slot / aggregate_rate_hz


def exact_divider(clock_hz: float, rate_hz: float, rel_tol: float = 1e-9) -> int | None:
    """The integer d with clock / d == rate (to ``rel_tol``), else None [DER]."""
    if rate_hz <= 0.0 or clock_hz <= 0.0:
        return None
    ratio = clock_hz / rate_hz
    if not ratio < 2.0**63:  # no integer divider that large exists (and inf would not round)
        return None
    d = round(ratio)
    if d >= 1 and math.isclose(clock_hz / d, rate_hz, rel_tol=rel_tol):
        return d
    return None


def ppm_error(actual: float, target: float) -> float:
    """Relative error in parts per million: (actual - target) / target x 1e6 [DER]."""
    return (actual - target) / target * 1e6


def nearest_divider(
    clock_hz: float,
    target_hz: float,
    dividers: Sequence[int] = (),
    divider_range: tuple[int, int] | None = None,
) -> int | None:
    """Allowed integer divider d whose rate clock / d is nearest to ``target_hz`` [DER].

    With a list of ``dividers`` the best of them (inside ``divider_range`` if given); otherwise the
    integers either side of clock / target, clamped to ``divider_range`` (or to d >= 1).
    Returns None when nothing is allowed.  Ties go to the smaller divider (the higher rate).
    """
    lo, hi = divider_range if divider_range is not None else (1, 2**63)
    lo = max(lo, 1)
    if hi < lo:
        return None
    if dividers:
        candidates = [d for d in dividers if lo <= d <= hi]
    else:
        ideal = min(clock_hz / target_hz, float(hi)) if target_hz > 0 else float(hi)
        candidates = sorted({min(max(d, lo), hi) for d in (math.floor(ideal), math.ceil(ideal))})
    if not candidates:
        return None
    return min(sorted(candidates), key=lambda d: abs(clock_hz / d - target_hz))


def record_bytes(stream_bps: float, duration_s: float) -> float:
    """Bytes written by a stream in a recording: B = R x T / 8 [DER]."""
    return stream_bps * duration_s / BITS_PER_BYTE


def holding_time(capacity_bytes: float, stream_bps: float) -> float:
    """How long a store lasts at a stream rate: T = 8 C / R, seconds (infinite for no stream) [DER]."""
    if stream_bps <= 0.0:
        return math.inf
    return capacity_bytes * BITS_PER_BYTE / stream_bps


def sampled_phase(filt: AnalogFilter | None, f_hz: float, delay_s: float = 0.0) -> float:
    """Phase, in radians, at which a channel records a sine at ``f_hz``: its filter's exact phase
    (:func:`generator.dsp.filters.phase_rad`; none: 0) plus 2 pi f t for a channel sampled t
    seconds after the reference instant [WT], [DER].

    Sampling t later reads x(nT + t) = sin(2 pi f (nT + t) + phi): the recorded sine *leads* by
    2 pi f t, so a later slot of a multiplexer scan cancels part of a filter's lag, it does not
    add to it.
    """
    phi = float(filters.phase_rad(filt, f_hz)) if filt is not None else 0.0
    return phi + 2.0 * math.pi * f_hz * delay_s


def phase_difference(a: AnalogFilter | None, b: AnalogFilter | None, f_hz: float, delay_a_s: float = 0.0,
                     delay_b_s: float = 0.0) -> float:
    """Phase of channel a minus channel b at ``f_hz``, radians: (phi_a + 2 pi f t_a) -
    (phi_b + 2 pi f t_b), each from :func:`sampled_phase` [WT], [DER]."""
    return sampled_phase(a, f_hz, delay_a_s) - sampled_phase(b, f_hz, delay_b_s)


def phase_difference_dc_estimate(a: AnalogFilter | None, b: AnalogFilter | None, f_hz: float,
                                 delay_a_s: float = 0.0, delay_b_s: float = 0.0) -> float:
    """The DC-delay estimate of the same difference: -2 pi f ((tau_a(0) - t_a) - (tau_b(0) - t_b)),
    radians [WT].

    Exact only where both delays are flat; it under-reads near the corner of a filter whose
    delay peaks there (Butterworth, Chebyshev).
    """
    ta = float(filters.group_delay_s(a, 0.0)) if a is not None else 0.0
    tb = float(filters.group_delay_s(b, 0.0)) if b is not None else 0.0
    return -2.0 * math.pi * f_hz * ((ta - delay_a_s) - (tb - delay_b_s))
