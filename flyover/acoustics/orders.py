"""Rotor tones by order tracking: each rotor's blade-passing harmonics from its own shaft angle.

Method (per analysed window): the signal de-Dopplerized to a rotor's hub is fitted, by least
squares, with constant complex amplitudes along every rotor's measured shaft angle at once:
``s(tau) = sum_{r, m} a_rm cos(2 pi m rev_r(tau)) + b_rm sin(2 pi m rev_r(tau)) + noise``, m the
shaft orders k x blades (k = 1..K). This is the zero-bandwidth limit of the multi-order Vold-Kalman
filter (Vold & Leuridan 1993): the amplitude is taken constant over a window (0.25-0.5 s, shorter
than the level changes of a passing vehicle), while the frequency follows the measured speed
through the phase track, so a speed change within the window costs nothing (a fixed-frequency
FFT smears a ramping tone over several bins). Fitting all rotors' orders jointly keeps one
rotor's tones out of another's estimate even where the array cannot tell the rotors apart.

The logged speed is refined within a small range by the fit itself: each rotor's speed over the
window is scaled by the factor (within +-``SPEED_REFINE``) that leaves the least residual in the
signal at its hub, the other rotors held. An ESC's speed reading scatters by a few rpm; at the
eighth shaft order that is a phase drift of a good part of a cycle over half a second, which a
fit along the raw logged speed would take as a lower level. A rotor whose components come close
to another rotor's anywhere in the refinement's range (their fit columns correlate above
``REFINE_CORRELATION``) keeps its logged speed: there the residual is least where the rotor takes
over its unresolved neighbour's tone, not at its own speed.

Which components can be told apart is decided on the fit actually made: two components whose
fit columns (exp(2 pi i m rev(tau)) over the window) correlate above ``SEPARATION_CORRELATION``
are one group, fitted with one column and given no level. For constant frequencies the
correlation is |sinc(pi df T)|: 0.64 half a bin apart, 0.5 at 0.6 bin, 0 at one bin; speeds that
cross inside the window correlate highly though they end more than a bin apart.

Each level carries its standard uncertainty from the fit's covariance, P(f) [(D^T D)^-1]_ii per
coefficient with P(f) the residual's power spectral density near the tone (Hann periodogram over
+-``NOISE_BINS`` bins), so a component crowded by a neighbour (a large diagonal) has a wide one;
and the noise's bias on the amplitude, E[a^2 + b^2] = A^2 + var a + var b, is taken off.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from flyover.model.constants import P0_PA


@dataclass(frozen=True)
class OrderTrack:
    """One component to fit: a rotor's shaft order over the window.

    Attributes
    ----------
    rotor : str
    order : int
        Shaft order (k x blades for the k-th blade-passing harmonic).
    harmonic : int
        k.
    revolutions : ndarray, shape (n,)
        The shaft's revolutions at the window's samples.
    """

    rotor: str
    order: int
    harmonic: int
    revolutions: np.ndarray

    def frequency_hz(self, sample_rate_hz: float) -> np.ndarray:
        """Instantaneous frequency at each sample (Hz)."""
        return self.order * np.gradient(self.revolutions) * sample_rate_hz


@dataclass(frozen=True)
class OrderFit:
    """The fitted amplitude of one component.

    Attributes
    ----------
    rotor, order, harmonic
    frequency_hz : float
        Mean frequency over the window (at emission).
    amplitude_pa : float
        Peak amplitude with the noise's bias taken off (NaN when not separable, 0 when the
        fit is no larger than the noise's contribution).
    phase_rad : float
        Phase of the cosine at the window's first sample (NaN when not separable).
    separable : bool
    snr_db : float
        The tone over the fit's residual near its frequency: 20 lg of the amplitude over the
        amplitude a tone would need to stand as high in the residual's Hann spectrum (the mean
        of the spectrum over +-``NOISE_BINS`` bins about the tone).
    amplitude_sd_pa : float
        Standard uncertainty of the amplitude from the fit's covariance.
    correlation : float
        The largest correlation of this component's fit column with another component's.
    level_db : float
        rms level, dB re 20 uPa (NaN when not separable).
    level_sd_db : float
        Standard uncertainty of the level (dB), first order in amplitude_sd / amplitude.
    """

    rotor: str
    order: int
    harmonic: int
    frequency_hz: float
    amplitude_pa: float
    phase_rad: float
    separable: bool
    snr_db: float = float("nan")
    amplitude_sd_pa: float = float("nan")
    correlation: float = float("nan")

    @property
    def level_db(self) -> float:
        return float(20 * np.log10(self.amplitude_pa / np.sqrt(2) / P0_PA)) \
            if np.isfinite(self.amplitude_pa) and self.amplitude_pa > 0 else float("nan")

    @property
    def level_sd_db(self) -> float:
        if not (np.isfinite(self.amplitude_pa) and self.amplitude_pa > 0):
            return float("nan")
        return float(20 / np.log(10) * self.amplitude_sd_pa / self.amplitude_pa)


SEPARATION_CORRELATION = 0.6   # columns this correlated: the noise's variance x 1.6 or more
REFINE_CORRELATION = 0.3       # refining a rotor near this close to another could drift to it
NOISE_BINS = 4                 # residual spectrum averaged over +-4 bins about a tone
SPEED_REFINE = 0.003           # +-0.3 %: well inside a 2 % spacing of rotor speeds
REFINE_STEPS = 25


def column_correlations(tracks: list[OrderTrack]) -> np.ndarray:
    """|mean(exp(i (phi_j - phi_k)))| of every pair of components over the window, shape
    (m, m): the correlation of their complex fit columns (1 on the diagonal)."""
    phasors = np.stack([np.exp(2j * np.pi * t.order * t.revolutions) for t in tracks])
    return np.abs(phasors @ phasors.conj().T) / phasors.shape[1]


def separable_groups(tracks: list[OrderTrack], *,
                     max_correlation: float = SEPARATION_CORRELATION) -> list[list[int]]:
    """Components in groups that cannot be told apart: two are joined when their fit columns
    correlate above ``max_correlation`` (:func:`column_correlations`)."""
    if not tracks:
        return []
    rho = column_correlations(tracks)
    parent = list(range(len(tracks)))

    def root(i):
        while parent[i] != i:
            i = parent[i]
        return i

    for i in range(len(tracks)):
        for j in range(i + 1, len(tracks)):
            if rho[i, j] > max_correlation:
                parent[root(j)] = root(i)
    groups: dict[int, list[int]] = {}
    for i in range(len(tracks)):
        groups.setdefault(root(i), []).append(i)
    return list(groups.values())


def _columns(track: OrderTrack) -> tuple[np.ndarray, np.ndarray]:
    """The cosine and sine fit columns of a component."""
    phase = 2 * np.pi * track.order * track.revolutions
    return np.cos(phase), np.sin(phase)


def _design(tracks, groups) -> np.ndarray:
    """A cosine and a sine column per group (its first component's phase)."""
    return np.stack([c for g in groups for c in _columns(tracks[g[0]])], axis=1)


def _residual_power(x, design) -> float:
    """The joint fit's residual sum of squares, from its normal equations: a quarter of the
    cost of lstsq's SVD, for the speed search's many trials (the separable groups keep the
    columns well conditioned; the fits themselves use lstsq)."""
    coef = np.linalg.solve(design.T @ design, design.T @ x)
    residual = x - design @ coef
    return float(residual @ residual)


def _least_squares(x, tracks, groups) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """The joint fit: coefficients, residual and the design matrix."""
    design = _design(tracks, groups)
    coef, *_ = np.linalg.lstsq(design, x, rcond=None)
    return coef, x - design @ coef, design


def _scaled(track: OrderTrack, factor: float) -> OrderTrack:
    """A track whose speed over the window is ``factor`` times its own (about the first
    sample)."""
    rev = track.revolutions
    return OrderTrack(track.rotor, track.order, track.harmonic, rev[0] + factor * (rev - rev[0]))


def refine_speeds(signals: dict, tracks: list[OrderTrack], *,
                  max_scale: float = SPEED_REFINE, steps: int = REFINE_STEPS
                  ) -> tuple[list[OrderTrack], dict[str, str]]:
    """Scale each rotor's shaft speed over the window by the factor within +-``max_scale``
    that leaves the least residual in the joint fit of the signal at that rotor's hub
    (``signals``: rotor -> signal), rotor by rotor; a rotor that comes near another's
    components within that range keeps its logged speed (see the module notes).

    Returns
    -------
    tracks : list of OrderTrack
        In the order given.
    kept : dict
        Rotor -> why its logged speed was kept.
    """
    rotors = list(dict.fromkeys(t.rotor for t in tracks))
    current = list(tracks)
    kept = {}
    for rotor in rotors:
        if rotor not in signals:
            continue
        mine = [i for i, t in enumerate(current) if t.rotor == rotor]
        others = [i for i, t in enumerate(current) if t.rotor != rotor]
        closest = 0.0
        for factor in (1.0 - max_scale, 1.0, 1.0 + max_scale):
            trial = [_scaled(tracks[i], factor) for i in mine] + [current[i] for i in others]
            rho = column_correlations(trial)[:len(mine), len(mine):]
            closest = max(closest, float(rho.max()) if rho.size else 0.0)
        if closest > REFINE_CORRELATION:
            kept[rotor] = (f"logged speed kept: another rotor's harmonic comes close (fit "
                           f"columns {closest:.2f} correlated within +-{100 * max_scale:g} %)")
            continue
        x = np.asarray(signals[rotor], float)

        def trial(factor):
            out = list(current)
            for i in mine:
                out[i] = _scaled(tracks[i], factor)
            return out

        groups = separable_groups(current)
        # Only the groups this rotor leads change with its speed: the others' columns are
        # formed once.
        design = _design(current, groups)
        led = [(k, g[0]) for k, g in enumerate(groups) if g[0] in mine]

        def residual_power(factor):
            for k, lead in led:
                design[:, 2 * k], design[:, 2 * k + 1] = _columns(_scaled(tracks[lead], factor))
            return _residual_power(x, design)

        factors = 1.0 + np.linspace(-max_scale, max_scale, steps)
        best = min(factors, key=residual_power)
        current = trial(best)
    return current, kept


def fit_orders(signal, tracks: list[OrderTrack], sample_rate_hz: float) -> list[OrderFit]:
    """Fit every component jointly to one signal (see the module docstring); which
    components are told apart is decided on these tracks (:func:`separable_groups`).

    Parameters
    ----------
    signal : ndarray, shape (n,)
        Pa, at emission times (e.g. de-Dopplerized to a hub).
    tracks : list of OrderTrack
        Each with ``revolutions`` of shape (n,).
    sample_rate_hz : float

    Returns
    -------
    list of OrderFit, in the order of ``tracks``.
    """
    x = np.asarray(signal, float)
    groups = separable_groups(tracks)
    rho = column_correlations(tracks)
    np.fill_diagonal(rho, 0.0)
    coef, residual, design = _least_squares(x, tracks, groups)
    inverse = np.linalg.pinv(design.T @ design)
    psd, noise = _residual_spectrum(residual, sample_rate_hz)
    out: list[OrderFit | None] = [None] * len(tracks)
    for gi, g in enumerate(groups):
        a, b = coef[2 * gi], coef[2 * gi + 1]
        alone = len(g) == 1
        for i in g:
            t = tracks[i]
            f = float(np.mean(t.frequency_hz(sample_rate_hz)))
            correlation = float(rho[i].max()) if len(tracks) > 1 else 0.0
            if not alone:
                out[i] = OrderFit(t.rotor, t.order, t.harmonic, f, float("nan"),
                                  float("nan"), False, float("nan"), float("nan"), correlation)
                continue
            var_a = psd(f) * inverse[2 * gi, 2 * gi]
            var_b = psd(f) * inverse[2 * gi + 1, 2 * gi + 1]
            raw = float(np.hypot(a, b))
            amplitude = float(np.sqrt(max(raw ** 2 - var_a - var_b, 0.0)))
            phase0 = 2 * np.pi * t.order * t.revolutions[0]
            out[i] = OrderFit(t.rotor, t.order, t.harmonic, f, amplitude,
                              float(np.angle(np.exp(1j * (phase0 - np.arctan2(b, a))))), True,
                              float(20 * np.log10(max(raw, 1e-30) / noise(f))),
                              float(np.sqrt(0.5 * (var_a + var_b))), correlation)
    return out


def _residual_spectrum(residual, sample_rate_hz: float):
    """Two functions of frequency: the residual's power spectral density near it (variance
    per unit of normalised frequency: the white-noise variance for white noise; a Hann
    periodogram averaged over +-``NOISE_BINS`` bins), and the amplitude of a tone whose Hann
    spectrum peak stands as high there."""
    n = len(residual)
    win = np.hanning(n)
    power = np.abs(np.fft.rfft(residual * win)) ** 2
    bin_hz = sample_rate_hz / n

    def mean_power(frequency_hz: float) -> float:
        k = int(round(frequency_hz / bin_hz))
        return float(np.mean(power[max(0, k - NOISE_BINS):k + NOISE_BINS + 1]))

    def psd(frequency_hz: float) -> float:
        return mean_power(frequency_hz) / float(np.sum(win ** 2))

    def tone(frequency_hz: float) -> float:
        return max(2 * np.sqrt(mean_power(frequency_hz)) / float(win.sum()), 1e-30)
    return psd, tone
