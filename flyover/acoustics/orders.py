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
fit along the raw logged speed would take as a lower level.

Two components whose frequencies stay within one frequency bin of each other (1 / window
length) over the window cannot be told apart by any fit of that window: they are reported as not
separable and given no level (one column stands for the group in the fit, so that the group does
not leak into the other components).
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
        Peak amplitude (NaN when not separable).
    phase_rad : float
        Phase of the cosine at the window's first sample (NaN when not separable).
    separable : bool
    snr_db : float
        The tone over the fit's residual near its frequency: 20 lg of the amplitude over the
        amplitude a tone would need to stand as high in the residual's Hann spectrum (the mean
        of the spectrum over +-``NOISE_BINS`` bins about the tone).
    level_db : float
        rms level, dB re 20 uPa (NaN when not separable).
    """

    rotor: str
    order: int
    harmonic: int
    frequency_hz: float
    amplitude_pa: float
    phase_rad: float
    separable: bool
    snr_db: float = float("nan")

    @property
    def level_db(self) -> float:
        return float(20 * np.log10(self.amplitude_pa / np.sqrt(2) / P0_PA)) \
            if np.isfinite(self.amplitude_pa) and self.amplitude_pa > 0 else float("nan")


def separable_groups(tracks: list[OrderTrack], sample_rate_hz: float) -> list[list[int]]:
    """Components in groups that cannot be told apart: two are joined when their frequencies
    differ by less than one bin (1 / window length) at every sample of the window."""
    n = len(tracks[0].revolutions) if tracks else 0
    bin_hz = sample_rate_hz / max(n, 1)
    freq = [t.frequency_hz(sample_rate_hz) for t in tracks]
    parent = list(range(len(tracks)))

    def root(i):
        while parent[i] != i:
            i = parent[i]
        return i

    for i in range(len(tracks)):
        for j in range(i + 1, len(tracks)):
            if np.max(np.abs(freq[i] - freq[j])) < bin_hz:
                parent[root(j)] = root(i)
    groups: dict[int, list[int]] = {}
    for i in range(len(tracks)):
        groups.setdefault(root(i), []).append(i)
    return list(groups.values())


NOISE_BINS = 4            # residual spectrum averaged over +-4 bins about a tone
SPEED_REFINE = 0.003      # +-0.3 %: well inside a 2 % spacing of rotor speeds
REFINE_STEPS = 25


def _least_squares(x, tracks, groups) -> tuple[np.ndarray, np.ndarray]:
    """The joint fit: a cosine and a sine column per group (its first component's phase);
    returns the coefficients and the residual."""
    cols = []
    for g in groups:
        phase = 2 * np.pi * tracks[g[0]].order * tracks[g[0]].revolutions
        cols += [np.cos(phase), np.sin(phase)]
    design = np.stack(cols, axis=1)
    coef, *_ = np.linalg.lstsq(design, x, rcond=None)
    return coef, x - design @ coef


def refine_speeds(signals: dict, tracks: list[OrderTrack], sample_rate_hz: float,
                  *, max_scale: float = SPEED_REFINE, steps: int = REFINE_STEPS
                  ) -> list[OrderTrack]:
    """Scale each rotor's shaft speed over the window (its revolutions about the first sample)
    by the factor within +-``max_scale`` that leaves the least residual in the joint fit of the
    signal at that rotor's hub (``signals``: rotor -> signal), rotor by rotor. Which components
    can be told apart is decided on the logged speeds (``tracks``) and kept: refining cannot
    make two rotors at one speed separable."""
    groups = separable_groups(tracks, sample_rate_hz)
    rotors = list(dict.fromkeys(t.rotor for t in tracks))
    current = list(tracks)
    for rotor in rotors:
        if rotor not in signals:
            continue
        x = np.asarray(signals[rotor], float)
        mine = [i for i, t in enumerate(current) if t.rotor == rotor]

        def scaled(factor):
            out = list(current)
            for i in mine:
                rev = tracks[i].revolutions
                out[i] = OrderTrack(rotor, tracks[i].order, tracks[i].harmonic,
                                    rev[0] + factor * (rev - rev[0]))
            return out

        factors = 1.0 + np.linspace(-max_scale, max_scale, steps)
        best = min(factors, key=lambda f: float(np.sum(_least_squares(x, scaled(f), groups)[1]
                                                        ** 2)))
        current = scaled(best)
    return current


def fit_orders(signal, tracks: list[OrderTrack], sample_rate_hz: float, *,
               groups: list[list[int]] | None = None) -> list[OrderFit]:
    """Fit every component jointly to one signal (see the module docstring).

    Parameters
    ----------
    signal : ndarray, shape (n,)
        Pa, at emission times (e.g. de-Dopplerized to a hub).
    tracks : list of OrderTrack
        Each with ``revolutions`` of shape (n,).
    sample_rate_hz : float
    groups : list of lists of int, optional
        The components that cannot be told apart (:func:`separable_groups`), when decided on
        other tracks (the logged speeds, before :func:`refine_speeds`).

    Returns
    -------
    list of OrderFit, in the order of ``tracks``.
    """
    x = np.asarray(signal, float)
    if groups is None:
        groups = separable_groups(tracks, sample_rate_hz)
    coef, residual = _least_squares(x, tracks, groups)
    noise = _noise_amplitude(residual, sample_rate_hz)
    out: list[OrderFit | None] = [None] * len(tracks)
    for gi, g in enumerate(groups):
        a, b = coef[2 * gi], coef[2 * gi + 1]
        alone = len(g) == 1
        for i in g:
            t = tracks[i]
            phase0 = 2 * np.pi * t.order * t.revolutions[0]
            f = float(np.mean(t.frequency_hz(sample_rate_hz)))
            amplitude = float(np.hypot(a, b))
            out[i] = OrderFit(t.rotor, t.order, t.harmonic, f,
                              amplitude if alone else float("nan"),
                              float(np.angle(np.exp(1j * (phase0 - np.arctan2(b, a)))))
                              if alone else float("nan"), alone,
                              float(20 * np.log10(amplitude / noise(f))) if alone
                              else float("nan"))
    return out


def _noise_amplitude(residual, sample_rate_hz: float):
    """A function of frequency: the amplitude of a tone whose Hann-windowed spectrum peak equals
    the residual's spectrum averaged over +-``NOISE_BINS`` bins there."""
    n = len(residual)
    win = np.hanning(n)
    power = np.abs(np.fft.rfft(residual * win)) ** 2
    bin_hz = sample_rate_hz / n

    def at(frequency_hz: float) -> float:
        k = int(round(frequency_hz / bin_hz))
        band = power[max(0, k - NOISE_BINS):k + NOISE_BINS + 1]
        return max(float(2 * np.sqrt(np.mean(band)) / win.sum()), 1e-30)
    return at
