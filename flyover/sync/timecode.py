"""A recorder's true clock from a timing channel: GNSS PPS and IRIG-B time code.

A timing channel is a spare input of the recorder fed with a GNSS receiver's pulse per second
(PPS) or an IRIG-B time code. Both give the sample positions of UTC second edges (IRIG-B also
of every 10 ms bit); a straight-line fit of sample position against UTC then gives the
recorder's true start and true sample rate (drift), and the fit's residual says how well.

Edges are found where the signal crosses halfway between its low and high levels, and placed
between samples at the centroid of the signal's rise (the mean of its sample-to-sample
increments over ``EDGE_HALF_WIDTH`` samples each side): a recorder's anti-aliasing filter makes
the edge smooth, and for a smooth edge this centroid is exact to far below a microsecond, where
linear interpolation of the crossing is off by up to 2 % of a sample period.

IRIG-B's amplitude-modulated form (a 1 kHz carrier, mark to space amplitude about 10:3) is first
demodulated with the analytic signal's magnitude; each bit's leading edge is then the carrier's
positive-going zero crossing (where the analytic signal's phase passes -pi/2) nearest the
envelope's rise (IRIG Standard 200: the on-time point of the AM form is a positive-going zero
crossing, from memory).

IRIG-B frame (IRIG Standard 200-16, format B, from memory): 100 bits of 10 ms per second, each a
pulse of 2 ms (binary 0), 5 ms (binary 1) or 8 ms (position identifier). The frame starts at the
leading edge of the reference marker Pr, the second of two consecutive 8 ms pulses (P0 ends the
previous frame); position identifiers P1..P9 sit at bits 9, 19, ..., 89 and P0 at bit 99. The
time of Pr's edge is encoded in BCD, least significant bit first:

    bits  1-4  seconds units (1, 2, 4, 8)      6-8   seconds tens (10, 20, 40)
         10-13 minutes units                   15-17 minutes tens (10, 20, 40)
         20-23 hours units                     25-26 hours tens (10, 20)
         30-33 day-of-year units               35-38 day-of-year tens (10 .. 80)
         40-41 day-of-year hundreds (100, 200)
         50-53 year units                      55-58 year tens (10 .. 80; 00-99, i.e. 20yy)
"""

from __future__ import annotations

import datetime as dt
from collections.abc import Callable
from dataclasses import dataclass, field, replace

import numpy as np

from flyover.model.errors import FlyoverInputError

IRIG_BIT_S = 0.01
_IRIG_FIELDS = {  # name: (first bit, weights)
    "seconds": ((1, 1), (2, 2), (3, 4), (4, 8), (6, 10), (7, 20), (8, 40)),
    "minutes": ((10, 1), (11, 2), (12, 4), (13, 8), (15, 10), (16, 20), (17, 40)),
    "hours": ((20, 1), (21, 2), (22, 4), (23, 8), (25, 10), (26, 20)),
    "day": ((30, 1), (31, 2), (32, 4), (33, 8), (35, 10), (36, 20), (37, 40), (38, 80),
            (40, 100), (41, 200)),
    "year": ((50, 1), (51, 2), (52, 4), (53, 8), (55, 10), (56, 20), (57, 40), (58, 80)),
}
IRIG_MARKERS = (0,) + tuple(range(9, 100, 10))
EDGE_HALF_WIDTH = 6       # samples each side of a crossing over which its rise is averaged
NOTED_RESIDUAL_S = 5e-6   # a clean PPS through a DAQ fits to about 1 us: edges further off are
MAX_RESIDUAL_S = 50e-6    # reported with their second; an edge 50 us off means the clock stepped
MAX_DRIFT_PPM = 500.0     # quartz clocks of recorders are within about 100 ppm


@dataclass(frozen=True)
class Edges:
    """Pulses found on a channel: leading edges (fractional samples) and widths (samples)."""

    position: np.ndarray
    width: np.ndarray


def pulse_edges(x, *, carrier_hz: float | None = None, sample_rate_hz: float | None = None,
                offset: int = 0) -> Edges:
    """The pulses of a timing signal, with sub-sample leading edges.

    Parameters
    ----------
    x : ndarray, shape (n,)
        The timing channel (any units; pulses high or low, taken as positive-going).
    carrier_hz, sample_rate_hz : float, optional
        For an amplitude-modulated time code: the carrier (demodulated first, edges moved to
        its positive-going zero crossings).
    offset : int
        Added to the positions (the frame of ``x[0]`` in the recording).
    """
    x = np.asarray(x, dtype=float)
    analytic = None
    if carrier_hz:
        from scipy.signal import hilbert  # every step loads a pass; few demodulate a code
        analytic = hilbert(x - np.median(x))
    sig = np.abs(analytic) if carrier_hz else x
    lo, hi = np.percentile(sig, [5, 95])
    near_a_level = (np.abs(sig - lo) < 0.1 * (hi - lo)) | (np.abs(sig - hi) < 0.1 * (hi - lo))
    if hi - lo <= 0 or np.mean(near_a_level) < 0.8:
        return Edges(np.empty(0), np.empty(0))   # not a two-level signal: noise, or nothing
    level = 0.5 * (lo + hi)
    above = sig >= level
    k_up = np.flatnonzero(~above[:-1] & above[1:])
    k_dn = np.flatnonzero(above[:-1] & ~above[1:])
    k_up = k_up[(k_up >= EDGE_HALF_WIDTH) & (k_up + EDGE_HALF_WIDTH < len(sig))]
    up = _rise_centroid(sig, k_up)
    dn = k_dn + (level - sig[k_dn]) / (sig[k_dn + 1] - sig[k_dn])
    j = np.searchsorted(dn, up)
    keep = j < len(dn)
    up, width = up[keep], dn[j[keep]] - up[keep]
    if carrier_hz:
        up = _carrier_zero_crossing(analytic, up, sample_rate_hz / carrier_hz)
        keep = np.isfinite(up)
        up, width = up[keep], width[keep]
    return Edges(up + offset, width)


def _rise_centroid(sig, k) -> np.ndarray:
    """Centroid of the increments ``sig[j + 1] - sig[j]`` (placed at j + 1/2) over
    ``EDGE_HALF_WIDTH`` samples each side of crossings between samples k and k + 1."""
    j = k[:, None] + np.arange(-EDGE_HALF_WIDTH + 1, EDGE_HALF_WIDTH)[None, :]
    d = np.clip(sig[j + 1] - sig[j], 0.0, None)
    return np.sum((j + 0.5) * d, axis=1) / np.sum(d, axis=1)


def _carrier_zero_crossing(analytic, near, period_samples: float) -> np.ndarray:
    """Per position, the carrier's positive-going zero crossing within half a period of it,
    where the analytic signal's phase passes -pi/2 (the phase does not see the amplitude step
    that the crossing of the signal itself would be pulled by)."""
    out = np.full(len(near), np.nan)
    half = int(np.ceil(period_samples / 2))
    for i, p in enumerate(near):
        k0 = max(0, int(p) - half)
        seg = np.angle(analytic[k0:int(p) + half + 2] * 1j)   # 0 where the phase is -pi/2
        k = np.flatnonzero((seg[:-1] < 0) & (seg[1:] >= 0) & (seg[1:] - seg[:-1] < np.pi))
        if len(k):
            cand = k0 + k + (-seg[k]) / (seg[k + 1] - seg[k])
            out[i] = cand[np.argmin(np.abs(cand - p))]
    return out


def channel_edges(read: Callable[[int, int], np.ndarray], n_frames: int, sample_rate_hz: float,
                  *, carrier_hz: float | None = None, block_s: float = 10.0) -> Edges:
    """:func:`pulse_edges` over a whole channel, block by block (memory follows the block).

    ``read(first, n)`` returns samples (n,). Blocks overlap by 1.2 s so that every pulse (at most
    1 s long for a PPS) lies whole inside one block; each block keeps the edges of its own part.
    """
    block = int(block_s * sample_rate_hz)
    overlap = int(1.2 * sample_rate_hz)
    pos, width = [], []
    start = 0
    while start < n_frames:
        stop = min(n_frames, start + block + overlap)
        e = pulse_edges(read(start, stop - start), carrier_hz=carrier_hz,
                        sample_rate_hz=sample_rate_hz, offset=start)
        own = (e.position >= start) & ((e.position < start + block) | (stop == n_frames))
        pos.append(e.position[own])
        width.append(e.width[own])
        start += block
    return Edges(np.concatenate(pos), np.concatenate(width))


def is_amplitude_modulated(x, sample_rate_hz: float) -> bool:
    """True for a 1 kHz-carrier time code: its signal crosses the middle of its range about
    2000 times a second, a level-shift code or a PPS a few hundred times at most (noise on a
    flat stretch does not reach the middle)."""
    lo, hi = np.percentile(x, [5, 95])
    x = np.asarray(x, float) - 0.5 * (lo + hi)
    crossings = np.count_nonzero(np.diff(np.signbit(x)))
    return crossings / (len(x) / sample_rate_hz) > 1000.0


@dataclass(frozen=True)
class TimingFit:
    """A recorder's clock measured from a timing channel.

    Attributes
    ----------
    kind : str
        'PPS', 'IRIG-B (DC level shift)' or 'IRIG-B (1 kHz AM)', joined by ' + ' for two.
    start_utc_ns : int
        True UTC of the recorder's sample 0.
    rate_hz : float
        True sample rate.
    drift_ppm : float
        True rate over the nominal rate, minus 1, in ppm.
    residual_rms_s, residual_max_s : float
        Of the edges about the fitted line.
    n_edges : int
    start_uncertainty_s, drift_uncertainty_ppm : float
        Standard errors of the fit.
    events : list of str
        Missing or extra pulses, with the UTC second where they happen.
    """

    kind: str
    start_utc_ns: int
    rate_hz: float
    drift_ppm: float
    residual_rms_s: float
    residual_max_s: float
    n_edges: int
    start_uncertainty_s: float
    drift_uncertainty_ppm: float
    events: list[str] = field(default_factory=list)


def _iso(utc_s: float) -> str:
    """UTC to the millisecond (as the recorder's own clock has it)."""
    return dt.datetime.fromtimestamp(round(utc_s, 3), dt.timezone.utc).strftime(
        "%Y-%m-%dT%H:%M:%S.%f")[:-3] + "Z"


def pps_seconds(edges: Edges, sample_rate_hz: float, nominal_start_utc_ns: int, *, where: str
                ) -> tuple[np.ndarray, np.ndarray, list[str]]:
    """Label PPS edges with their UTC second.

    The nominal start (the recorder's own time of sample 0) must be right to within half a
    second. Missing pulses are accepted and reported; extra pulses (glitches between seconds)
    are dropped and reported; pulses at another rate, or a jump of the pulse train, are refused.

    Returns
    -------
    positions : ndarray
        Edge positions (fractional samples).
    utc_s : ndarray of int
        Their UTC seconds (since the Unix epoch).
    events : list of str
    """
    pos = np.asarray(edges.position, float)
    if len(pos) < 2:
        raise FlyoverInputError("no timing pulses on the timing channel", where,
                                "a PPS (a pulse every second, at least two in the recording) "
                                "or an IRIG-B time code", f"{len(pos)} pulse(s)",
                                "check that the channel is the GNSS receiver's PPS or time-code "
                                "output, and that it is not a microphone")
    nominal_s = nominal_start_utc_ns / 1e9 + pos / sample_rate_hz
    events = []
    # Drop glitches: edges a whole number of seconds from no other edge.
    d = (pos[:, None] - pos[None, :]) / sample_rate_hz
    kept = np.any((np.abs(d - np.round(d)) < 1e-3) & (np.round(d) != 0), axis=1)
    events += [f"extra pulse near {_iso(s)} (dropped)" for s in nominal_s[~kept]]
    if np.count_nonzero(kept) >= 2:
        pos, nominal_s = pos[kept], nominal_s[kept]
    step = np.diff(pos) / sample_rate_hz
    whole = np.round(step)
    off = np.abs(step - whole) > 1e-3
    if np.mean(off) > 0.5 or len(step) == 0:
        raise FlyoverInputError("timing pulses at the wrong rate", where,
                                "one pulse per second (PPS)",
                                f"pulses every {np.median(step):.4f} s",
                                "is this channel a PPS, or a time code or a sync signal?")
    if np.any(off):
        k = int(np.flatnonzero(off)[0])
        raise FlyoverInputError("the PPS pulse train jumps", where,
                                "pulses a whole number of seconds apart",
                                f"{step[k]:.6f} s between the pulses at {_iso(nominal_s[k])} and "
                                f"{_iso(nominal_s[k + 1])}",
                                "the GNSS receiver lost and regained lock: split the pass there "
                                "or give the clock another way")
    for k in np.flatnonzero(whole > 1):
        events.append(f"{int(whole[k]) - 1} missing pulse(s) after {_iso(nominal_s[k])}")
    seconds = np.round(nominal_s[0]) + np.concatenate([[0], np.cumsum(whole)])
    return pos, seconds.astype(np.int64), events


@dataclass(frozen=True)
class IrigFrame:
    """One decoded IRIG-B frame: the sample position of its Pr edge and the UTC it encodes."""

    position: float
    utc_s: int
    bit_positions: np.ndarray   # leading edges of its 100 bits (fractional samples)


def irig_symbols(width_s) -> np.ndarray:
    """IRIG-B symbols from pulse widths: 0 (2 ms), 1 (5 ms), 2 for a position identifier (8 ms),
    -1 for anything else."""
    w = np.asarray(width_s, float)
    out = np.full(len(w), -1)
    out[(w > 0.001) & (w < 0.0035)] = 0
    out[(w >= 0.0035) & (w < 0.0065)] = 1
    out[(w >= 0.0065) & (w < 0.0095)] = 2
    return out


def irig_fields(bits) -> dict[str, int]:
    """BCD fields of a frame's 100 symbols (see the module notes)."""
    b = np.asarray(bits)
    return {name: int(sum(w for k, w in spec if b[k] == 1)) for name, spec in _IRIG_FIELDS.items()}


def decode_irig(edges: Edges, sample_rate_hz: float, *, near_utc_s: float | None,
                where: str) -> list[IrigFrame]:
    """Decode every complete IRIG-B frame of a channel's pulses.

    Parameters
    ----------
    near_utc_s : float, optional
        The recorder's own time of the take (its start, UTC seconds), used where the frames
        carry no year (all year bits zero): the year that puts the frame's day nearest to it,
        so that a take over a new year's midnight is placed right.
    """
    pos = np.asarray(edges.position, float)
    sym = irig_symbols(np.asarray(edges.width) / sample_rate_hz)
    frames = []
    starts = np.flatnonzero((sym[:-1] == 2) & (sym[1:] == 2)) + 1
    for s in starts:
        if s + 100 > len(sym):
            break
        bits = sym[s:s + 100]
        spacing = np.diff(pos[s:s + 100]) / sample_rate_hz
        if (np.any(bits < 0) or np.any(np.abs(spacing - IRIG_BIT_S) > 1e-4)
                or np.any(bits[list(IRIG_MARKERS)] != 2)
                or np.any(np.delete(bits, IRIG_MARKERS) == 2)):
            continue
        f = irig_fields(bits)
        if not (f["seconds"] < 60 and f["minutes"] < 60 and f["hours"] < 24
                and 1 <= f["day"] <= 366):
            continue
        year = 2000 + f["year"] if f["year"] else None
        if year is None:
            if near_utc_s is None:
                raise FlyoverInputError(
                    "the IRIG-B frames carry no year", where, "year bits, or a start time of "
                    "the recorder (file or start_utc) to take the year from")
            near = dt.datetime.fromtimestamp(near_utc_s, dt.timezone.utc)
            year = min((near.year - 1, near.year, near.year + 1),
                       key=lambda y: abs((dt.datetime(y, 1, 1, tzinfo=dt.timezone.utc)
                                          + dt.timedelta(f["day"] - 1) - near).total_seconds()))
        day0 = dt.datetime(year, 1, 1, tzinfo=dt.timezone.utc) + dt.timedelta(days=f["day"] - 1)
        utc = int(day0.timestamp()) + f["hours"] * 3600 + f["minutes"] * 60 + f["seconds"]
        frames.append(IrigFrame(float(pos[s]), utc, pos[s:s + 100].copy()))
    return frames


def fit_clock(positions, utc_s, fraction_s, sample_rate_hz: float, kind: str,
              events: list[str], *, where: str) -> TimingFit:
    """Straight-line fit of edge position against UTC: the true start and rate.

    Parameters
    ----------
    positions : ndarray
        Edge positions (fractional samples).
    utc_s : ndarray of int
        Their UTC seconds since the Unix epoch.
    fraction_s : ndarray
        Plus these fractions of a second (IRIG-B bits: multiples of 10 ms), kept apart so that
        no precision is lost to the size of Unix times.
    """
    pos = np.asarray(positions, float)
    t0 = int(np.min(utc_s))
    x = (np.asarray(utc_s, np.int64) - t0) + np.asarray(fraction_s, float)
    t = t0 + x
    a = np.stack([np.ones_like(x), x], axis=1)
    coef, *_ = np.linalg.lstsq(a, pos, rcond=None)
    intercept, rate = coef
    res_s = (pos - a @ coef) / rate
    rms = float(np.sqrt(np.mean(res_s ** 2)))
    drift = (rate / sample_rate_hz - 1.0) * 1e6
    if abs(drift) > MAX_DRIFT_PPM:
        raise FlyoverInputError("the timing channel gives an implausible sample rate", where,
                                f"within {MAX_DRIFT_PPM:.0f} ppm of {sample_rate_hz:g} Hz",
                                f"{rate:.3f} Hz ({drift:+.0f} ppm)",
                                "is the recorder's nominal rate in the file header right?")
    worst = int(np.argmax(np.abs(res_s)))
    off = np.flatnonzero(np.abs(res_s) > NOTED_RESIDUAL_S)
    if len(off):
        events = events + [f"{len(off)} edge(s) more than {NOTED_RESIDUAL_S * 1e6:.0f} us off "
                           f"the clock line, the worst {abs(res_s[worst]) * 1e6:.1f} us at "
                           f"{_iso(t[worst])}"]
    if abs(res_s[worst]) > MAX_RESIDUAL_S:
        raise FlyoverInputError(
            "the timing channel's edges do not follow one clock", where,
            f"edges within {MAX_RESIDUAL_S * 1e6:.0f} us of a straight line",
            f"{abs(res_s[worst]) * 1e6:.1f} us off at {_iso(t[worst])} (rms "
            f"{rms * 1e6:.1f} us over {len(pos)} edges)",
            "a noisy or clipped timing channel, or a clock that stepped during the take")
    n = len(pos)
    sigma = float(np.sqrt(np.sum((pos - a @ coef) ** 2) / max(n - 2, 1)))   # samples
    cov = sigma ** 2 * np.linalg.inv(a.T @ a)
    # UTC of sample 0: t0 - intercept / rate; its variance through the gradient of that.
    start_ns = t0 * 1_000_000_000 + int(round(-intercept / rate * 1e9))
    grad = np.array([-1.0 / rate, intercept / rate ** 2])
    start_unc = float(np.sqrt(grad @ cov @ grad))
    return TimingFit(kind, start_ns, float(rate), float(drift), rms,
                     float(abs(res_s[worst])), n, start_unc,
                     float(np.sqrt(cov[1, 1]) / sample_rate_hz * 1e6), events)


def _kind(edges: Edges, sample_rate_hz: float) -> str:
    step = np.median(np.diff(edges.position)) / sample_rate_hz if len(edges.position) > 1 else 0
    return "IRIG-B" if abs(step - IRIG_BIT_S) < 0.002 else "PPS"


def measure_clock(channels: dict[str, Callable[[int, int], np.ndarray]], n_frames: int,
                  sample_rate_hz: float, nominal_start_utc_ns: int | None, *,
                  where: str) -> TimingFit:
    """A recorder's true clock from its timing channels (one PPS, one IRIG-B, or both).

    Parameters
    ----------
    channels : dict of name -> read(first, n) -> samples (n,)
        The timing channels, each detected as a PPS or an IRIG-B code (level shift or AM).
    n_frames : int
        Frames of the recorder.
    sample_rate_hz : float
        Its nominal rate.
    nominal_start_utc_ns : int, optional
        Its own start time (file or typed): needed for a PPS alone, within half a second.
    where : str
        The recorder, for messages.
    """
    decoded = {}
    for name, read in channels.items():
        probe = read(0, min(n_frames, int(2 * sample_rate_hz)))
        carrier = 1000.0 if is_amplitude_modulated(probe, sample_rate_hz) else None
        edges = channel_edges(read, n_frames, sample_rate_hz, carrier_hz=carrier)
        kind = _kind(edges, sample_rate_hz)
        if kind == "IRIG-B":
            kind += " (1 kHz AM)" if carrier else " (DC level shift)"
        decoded[name] = (kind, edges)
    positions, utc, fraction, events, kinds = [], [], [], [], []
    start_ns = nominal_start_utc_ns
    for name, (kind, edges) in sorted(decoded.items(), key=lambda kv: kv[1][0] == "PPS"):
        at = f"{where}, timing channel {name}"
        if kind.startswith("IRIG-B"):
            frames = decode_irig(edges, sample_rate_hz, where=at,
                                 near_utc_s=None if start_ns is None else start_ns / 1e9)
            if not frames:
                raise FlyoverInputError("no complete IRIG-B frame on the timing channel", at,
                                        "IRIG-B: 100 pulses a second of 2, 5 or 8 ms",
                                        f"{len(edges.position)} pulses, no frame decoded",
                                        "is the code IRIG-B (not A or G), and not clipped?")
            for f in frames:
                positions.append(f.bit_positions)
                utc.append(np.full(100, f.utc_s, np.int64))
                fraction.append(IRIG_BIT_S * np.arange(100))
            # A PPS is labelled from the code's absolute time rather than the typed start.
            first = frames[0]
            start_ns = int(round((first.utc_s - first.position / sample_rate_hz) * 1e9))
        else:
            if start_ns is None:
                raise FlyoverInputError(
                    "a PPS alone cannot tell which second it marks", at,
                    "the recorder's start within half a second: a file with a time reference "
                    "(Broadcast WAV, TDMS), start_utc, or an IRIG-B channel", "none of them")
            pos, sec, ev = pps_seconds(edges, sample_rate_hz, start_ns, where=at)
            positions.append(pos)
            utc.append(sec)
            fraction.append(np.zeros(len(sec)))
            events += ev
        kinds.append(kind)
    return fit_clock(np.concatenate(positions), np.concatenate(utc), np.concatenate(fraction),
                     sample_rate_hz, " + ".join(kinds), events, where=where)


def measure_clock_over(channels: dict[str, Callable[[int, int], np.ndarray]], first_frame: int,
                       n_frames: int, sample_rate_hz: float, nominal_start_utc_ns: int | None, *,
                       where: str) -> TimingFit:
    """:func:`measure_clock` from a stretch of the recording only (frames ``first_frame`` to
    ``first_frame + n_frames``): a pass cut from a long recording reads its own stretch, not the
    whole file. The fitted start is carried back to the recording's sample 0 along the fitted
    rate; the uncertainties stay the stretch's, which is where the pass is timed.

    ``channels`` read frames of the whole recording; ``nominal_start_utc_ns`` is its sample 0's.
    """
    def shifted(read):
        return lambda first, n: read(first_frame + first, n)
    nominal = (None if nominal_start_utc_ns is None else
               nominal_start_utc_ns + int(round(first_frame / sample_rate_hz * 1e9)))
    fit = measure_clock({k: shifted(v) for k, v in channels.items()}, n_frames, sample_rate_hz,
                        nominal, where=where)
    return replace(fit, start_utc_ns=fit.start_utc_ns
                   - int(round(first_frame / fit.rate_hz * 1e9)))
