"""Shared steps of the frequency-domain methods (no method is registered here): the window's
focus, CSM and steering from a window context, and a unit source's steering."""

from __future__ import annotations

import numpy as np

from flyover.imaging.csm import Focus, Steering, window_csm, window_focus
from flyover.imaging.reception import reception_geometry, subset
from flyover.imaging.window import WindowContext

# Every channel is de-Dopplerized toward the body origin.
FOCUS_BODY_M = np.zeros(3)


def focus_of(context: WindowContext) -> Focus:
    """The window's focus (computed once per window)."""
    return context.derived("focus", lambda: window_focus(
        track=context.track, window=context.window, mic_enu_m=context.mic_enu_m,
        atmosphere=context.atmosphere, settings=context.settings, focus_body_m=FOCUS_BODY_M))


def csm_and_steering(signals_pa, context: WindowContext) -> tuple[np.ndarray, Steering,
                                                                  np.ndarray]:
    """The window's CSMs, the steering of every grid point of the context, and the CSMs'
    factor (:func:`flyover.imaging.csm.window_csm`)."""
    focus = focus_of(context)
    csm, factor = window_csm(signals_pa, context.first_frame, focus, window=context.window,
                        clock=context.clock, atmosphere=context.atmosphere,
                        settings=context.settings)
    return csm, focus.steering(context.centre_geometry), factor


def unit_steering(body_m, points, context: WindowContext) -> tuple[Steering, Steering]:
    """The steering of the context's grid points ``points`` and of a source at ``body_m``
    ((3,), or (n_bands, 3): a position per band)."""
    focus = focus_of(context)
    s = context.settings
    source = reception_geometry(context.track, context.window, np.atleast_2d(body_m),
                                context.mic_enu_m, context.atmosphere, s.pressure_gain,
                                node_step=s.node_step, ends_only=True)
    grid = context.derived(("grid steering", np.asarray(points).tobytes()),
                           lambda: focus.steering(subset(context.centre_geometry, points)))
    return grid, focus.steering(source)

