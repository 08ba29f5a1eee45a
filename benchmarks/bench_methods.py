"""Speed and memory of each imaging method over one whole pass of an outside-like geometry.
Prints figures; asserts nothing.

Run:  python benchmarks/bench_methods.py [--threads 2] [--windows N] [--baseline-windows 2]

Geometry (the one the issues quote): a 48-microphone spiral 12 m across, a vehicle grid of
61 x 51 points at 0.1 m, 0.25 s windows at a 0.125 s hop over a 4 s pass at 51.2 kHz, two
regions, 35 m overhead at 25 m/s. For each method, over every window of the pass (or the
``--windows`` nearest overhead): the wall time of the pass and per window with a profile by
step (geometry, the method's maps, the unit sources' point-spreads and the leakage solve),
the peak memory of a window (tracemalloc, numpy allocations, on the middle window apart from
the timing), and the effective rate
mic * point * sample / s against a plain numpy delay-and-sum (linear node interpolation,
4-point Lagrange: the kernel's naive reference) measured in the same run on a subset of
points. The time-domain method is also run, on ``--baseline-windows`` windows, as the
previous engine formed it (every microphone's spectrum per point, unit sources simulated and
mapped), the baseline of the speed-ups printed at the end.
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
from flyover.imaging.chain import ChainSettings  # noqa: E402
from flyover.imaging.methods import method_named  # noqa: E402
from flyover.imaging.window import (blas_on_one_thread, image_window,  # noqa: E402
                                    window_context)
from flyover.geometry.vehicle import Region, VehicleGrid  # noqa: E402
from flyover.sim.scenario import incoherent_noise_pa, spiral_layout  # noqa: E402
from flyover.model.timebase import ArrayClock, RecordingClock  # noqa: E402

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


def numpy_rate(context, signals, n_points: int = 8, repeats: int = 3) -> float:
    """mic * point * sample / s of the plain numpy de-Dopplerization of a few grid points, the
    best of a few runs (the reference at its fastest)."""
    from test_dedoppler import naive_dedoppler
    geo = context.geometry
    rx = context.clock.sample_index(geo.reception_s[:n_points]) - context.first_frame[:, None]
    best = np.inf
    for _ in range(repeats):
        t0 = time.perf_counter()
        naive_dedoppler(signals, rx, geo.amplitude[:n_points], context.settings.node_step,
                        context.window.n_samples)
        best = min(best, time.perf_counter() - t0)
    return rx.shape[1] * n_points * context.window.n_samples / best


def per_microphone_method():
    """The time-domain method as the previous engine formed it: every microphone's spectrum
    per point, unit sources simulated and mapped through the same chain."""
    from dataclasses import replace

    from flyover.imaging.dedoppler import _per_microphone_band_powers, _UsedChain
    from flyover.imaging.reception import absorption_gains
    from flyover.imaging.methods.time_domain import simulated_point_spread

    def band_maps(signals, ctx):
        chain = _UsedChain(signals, ctx.first_frame, ctx.geometry, ctx.clock,
                           np.asarray(ctx.settings.weights, float),
                           absorption_gains(ctx.settings, ctx.atmosphere, ctx.geometry))
        return _per_microphone_band_powers(chain, ctx.window, ctx.settings, ctx.atmosphere,
                                           workers=ctx.workers)

    def point_spread(body_m, points, ctx, seed):
        body = np.asarray(body_m, float)
        if body.ndim == 2:      # one position per band: simulated one band position at a time
            body = body[len(body) // 2]
        return simulated_point_spread(body, points, ctx, seed)

    return replace(method_named("time-domain"), name="time-domain, previous engine",
                   band_maps=band_maps, point_spread=point_spread)


def time_method(method, chosen, *, track, clock, atm, mics, points, settings, regions, p,
                threads):
    """Seconds per step summed over the windows, and the peak memory of the middle window
    (traced apart: tracing slows allocation down)."""
    from dataclasses import replace
    times = {"geometry": 0.0, "maps": 0.0, "unit sources and solve": 0.0}

    def one(w):
        t0 = time.perf_counter()
        ctx = window_context(w, track=track, clock=clock, atmosphere=atm, mic_enu_m=mics,
                             grid_points_m=points, settings=settings, workers=threads)
        span = np.stack([p[m, f:f + ctx.n_frames] for m, f in enumerate(ctx.first_frame)])
        if method.name.startswith("time-domain"):
            ctx.geometry          # the full node geometry is the time-domain chain's
        t1 = time.perf_counter()
        with blas_on_one_thread():        # as image_window runs it
            maps = method.band_maps(span, ctx)
        t2 = time.perf_counter()
        # The unit sources and the solve alone: the window's maps given back as computed.
        given = replace(method, band_maps=lambda *_: maps)
        image_window(span, ctx, method=given, grid_points_m=points, regions=regions)
        return (t1 - t0, t2 - t1, time.perf_counter() - t2), ctx, span

    for w in chosen:
        steps, ctx, span = one(w)
        for k, v in zip(times, steps):
            times[k] += v
    tracemalloc.start()
    one(chosen[len(chosen) // 2])
    peak = tracemalloc.get_traced_memory()[1]
    tracemalloc.stop()
    return times, peak, ctx, span


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--windows", type=int, default=0, help="windows to time (0: the pass)")
    ap.add_argument("--baseline-windows", type=int, default=2)
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

    def nearest_overhead(n):
        mid = len(windows) // 2
        return windows[max(0, mid - n // 2): max(0, mid - n // 2) + n]

    chosen = nearest_overhead(args.windows) if args.windows else windows
    print(f"grid {grid.shape[0]} x {grid.shape[1]} = {len(points)} points, {len(windows)} "
          f"windows of {chosen[0].n_samples} samples in the pass; timing {len(chosen)} of them")
    # Warm the compiled kernels once (a small grid through every method).
    ctx = window_context(chosen[0], track=track, clock=clock, atmosphere=atm, mic_enu_m=mics,
                         grid_points_m=points[::97], settings=settings)
    span = np.stack([p[m, f:f + ctx.n_frames] for m, f in enumerate(ctx.first_frame)])
    for name in METHODS:
        image_window(span, ctx, method=method_named(name), grid_points_m=points[::97],
                     regions=regions)
    common = dict(track=track, clock=clock, atm=atm, mics=mics, points=points,
                  settings=settings, regions=regions, p=p, threads=args.threads)
    work = len(mics) * len(points) * chosen[0].n_samples
    reference = None
    per_window = {}
    runs = [(per_microphone_method(), nearest_overhead(args.baseline_windows))]
    runs += [(method_named(name), chosen) for name in METHODS]
    for method, these in runs:
        if not these:
            continue
        times, peak, ctx, span = time_method(method, these, **common)
        if reference is None:
            reference = numpy_rate(ctx, span)
        per = {k: v / len(these) for k, v in times.items()}
        total = sum(per.values())
        per_window[method.name] = total
        rate = work / total
        print(f"{method.name:>29}: {total:6.2f} s per window over {len(these)} ("
              + ", ".join(f"{k} {v:.2f} s" for k, v in per.items())
              + f"); peak memory {peak / 2**20:.0f} MiB; {rate:.2e} mic*point*sample/s = "
              f"{rate / reference:.1f}x numpy on {args.threads} cores "
              f"({rate / reference / args.threads:.1f}x per CPU-second); "
              f"the pass ({len(windows)} windows) {total * len(windows):.0f} s")
    print(f"numpy reference: {reference:.2e} mic*point*sample/s (one core)")
    base = per_window.get("time-domain, previous engine")
    if base:
        print("speed-up per window against the previous time-domain engine: "
              + ", ".join(f"{name} {base / t:.1f}x" for name, t in per_window.items()
                          if name != "time-domain, previous engine"))


if __name__ == "__main__":
    main()
