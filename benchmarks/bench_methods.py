"""Speed and memory of each imaging method on an outside-like geometry. Prints figures; asserts
nothing.

Run:  python benchmarks/bench_methods.py [--windows 3] [--threads 2]

Geometry (the one the issues quote): a 48-microphone spiral 12 m across, a vehicle grid of
61 x 51 points at 0.1 m, 0.25 s windows at a 0.125 s hop over a 4 s pass at 51.2 kHz, two
regions, 35 m overhead at 25 m/s. For each method, over ``--windows`` windows near overhead:
the wall time per window with a profile by step (geometry, the method's maps, the unit
sources' point-spreads and the leakage solve), the peak memory of the step (tracemalloc, numpy
allocations), and the effective rate mic * point * sample / s against a plain numpy
delay-and-sum (linear node interpolation, 4-point Lagrange: the kernel's naive reference)
measured in the same run on a subset of points.
"""

from __future__ import annotations

import argparse
import sys
import time
import tracemalloc
from pathlib import Path

import numba
import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "tests"))

from flyover.acoustics.atmosphere import Atmosphere  # noqa: E402
from flyover.acoustics.bands import third_octave_bands  # noqa: E402
from flyover.forward.moving_source import (Broadband, PointSource, Propagator,  # noqa: E402
                                           SourceSignal, Tone, received_pressure_pa)
from flyover.geometry.track import straight_track  # noqa: E402
from flyover.geometry.windows import plan_windows  # noqa: E402
from flyover.imaging.dedoppler import ChainSettings, dedopplerized_signals  # noqa: E402
from flyover.imaging.methods import method_named  # noqa: E402
from flyover.imaging.window import image_window, window_context  # noqa: E402
from flyover.model.campaign import Region, VehicleGrid  # noqa: E402
from flyover.sim.scenario import incoherent_noise_pa, spiral_layout  # noqa: E402
from flyover.sync.timebase import ArrayClock, RecordingClock  # noqa: E402

FS = 51200.0
METHODS = ("time-domain", "frequency-domain", "functional", "clean-sc")


def scene():
    mics = spiral_layout(6, 8, 0.6, 6.0, 140.0)
    atm = Atmosphere(15.0, 70.0)
    track, *_ = straight_track(25.0, 35.0, 90.0, 2.0, -3.0, 7.0)
    sources = [PointSource("front", (1.1, 0.0, 0.0), tones=(Tone(630.0, 90.0),),
                           broadband=Broadband(86.0, -2.0, 100.0, 8000.0), seed=1),
               PointSource("rear", (-1.4, 0.0, 0.0),
                           broadband=Broadband(84.0, 0.0, 100.0, 8000.0), seed=2)]
    sigs = [SourceSignal(s, FS, -3.0, 7.0) for s in sources]
    n = int(4 * FS)
    p = received_pressure_pa(track, sigs, [np.array(s.body_m) for s in sources],
                             Propagator(mics, atm, 2.0), FS, 0.0, n)
    p += incoherent_noise_pa(len(mics), n, 45.0, 3)
    return mics, atm, track, p.astype(np.float32)


def numpy_rate(context, signals, n_points: int = 3) -> float:
    """mic * point * sample / s of the plain numpy de-Dopplerization of a few grid points."""
    from test_dedoppler import naive_dedoppler
    geo = context.geometry
    rx = context.clock.sample_index(geo.reception_s[:n_points]) - context.first_frame[:, None]
    t0 = time.perf_counter()
    naive_dedoppler(signals, rx, geo.amplitude[:n_points], context.settings.node_step,
                    context.window.n_samples)
    return rx.shape[1] * n_points * context.window.n_samples / (time.perf_counter() - t0)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--windows", type=int, default=3)
    ap.add_argument("--threads", type=int, default=2)
    args = ap.parse_args()
    numba.set_num_threads(args.threads)
    t0 = time.perf_counter()
    mics, atm, track, p = scene()
    print(f"simulated 4 s at {FS:g} Hz, {len(mics)} microphones: {time.perf_counter() - t0:.1f} s")
    grid = VehicleGrid((-3.0, 3.0), (-2.5, 2.5), 0.1)
    points = grid.points_m()
    regions = {"front": Region("front", (0.4, 1.8), (-0.7, 0.7)),
               "rear": Region("rear", (-2.1, -0.7), (-0.7, 0.7))}
    clock = ArrayClock.of_recorders([RecordingClock(0, 0.0, FS)], np.zeros(len(mics), int))
    bands = third_octave_bands(200, 5000)
    settings = ChainSettings(bands, np.ones(len(mics)), 2.0)
    windows = plan_windows(track, mics.mean(0), (0.4, 3.6), 0.25, 0.125, FS,
                           max_polar_offset_deg=60)
    mid = len(windows) // 2
    chosen = windows[mid - args.windows // 2: mid - args.windows // 2 + args.windows]
    print(f"grid {grid.shape[0]} x {grid.shape[1]} = {len(points)} points, {len(windows)} "
          f"windows of {chosen[0].n_samples} samples in the pass; timing {len(chosen)} of them")
    # Warm the compiled kernel once.
    ctx = window_context(chosen[0], track=track, clock=clock, atmosphere=atm, mic_enu_m=mics,
                         grid_points_m=points[:2], settings=settings)
    span = np.stack([p[m, f:f + ctx.n_frames] for m, f in enumerate(ctx.first_frame)])
    dedopplerized_signals(span, ctx.first_frame, ctx.geometry, clock, chosen[0], settings)
    reference = None
    for name in METHODS:
        method = method_named(name)
        times = {"geometry": 0.0, "maps": 0.0, "unit sources and solve": 0.0}
        peak = 0
        for w in chosen:
            tracemalloc.start()
            t0 = time.perf_counter()
            ctx = window_context(w, track=track, clock=clock, atmosphere=atm, mic_enu_m=mics,
                                 grid_points_m=points, settings=settings,
                                 workers=args.threads)
            span = np.stack([p[m, f:f + ctx.n_frames] for m, f in enumerate(ctx.first_frame)])
            t1 = time.perf_counter()
            maps = method.band_maps(span, ctx)
            t2 = time.perf_counter()
            # The unit sources and the solve alone: the window's maps given back as computed.
            given = type(method)(name, method.summary, lambda *_: maps, method.point_spread)
            image_window(span, ctx, method=given, grid_points_m=points, regions=regions)
            t3 = time.perf_counter()
            peak = max(peak, tracemalloc.get_traced_memory()[1])
            tracemalloc.stop()
            times["geometry"] += t1 - t0
            times["maps"] += t2 - t1
            times["unit sources and solve"] += t3 - t2
            if reference is None:
                reference = numpy_rate(ctx, span)
        per = {k: v / len(chosen) for k, v in times.items()}
        total = sum(per.values())
        work = len(mics) * len(points) * chosen[0].n_samples
        print(f"{name:>17}: {total:7.2f} s per window ("
              + ", ".join(f"{k} {v:.2f} s" for k, v in per.items())
              + f"); peak memory {peak / 2**20:.0f} MiB; "
              f"{work / total:.2e} mic*point*sample/s = {work / total / reference:.0f}x numpy"
              f"; a 4 s pass ({len(windows)} windows) ~{total * len(windows):.0f} s")
    print(f"numpy reference: {reference:.2e} mic*point*sample/s")


if __name__ == "__main__":
    main()
