"""Speed and memory of the imaging chain. Prints figures; asserts nothing.

Run:  python benchmarks/bench_imaging.py [--threads 2] [--skip-pass]

1. Kernel throughput (microphone x grid point x sample per second) of the numba kernel with
   demo sizes (48 microphones, 775 grid points, 0.25 s at 25.6 kHz), and of the plain numpy
   reference on a subset, in the same run; compile time reported apart.
2. The cost of the band step (FFTs of every de-Dopplerized signal) per window.
3. Wall time and peak memory of one demo pass end to end (align, image, levels and QC stages),
   and the same pass with its recording padded to 60 s: memory follows the window, not the file.
"""

from __future__ import annotations

import argparse
import shutil
import sys
import tempfile
import time
from pathlib import Path

import numba
import numpy as np
import scipy.fft

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "tests"))
sys.path.insert(0, str(ROOT / "benchmarks"))

from _measure import measured_stage  # noqa: E402

from flyover.imaging import _kernels  # noqa: E402


def kernel_figures(threads: int) -> None:
    from test_dedoppler import naive_dedoppler
    rng = np.random.default_rng(0)
    n_m, n_g, n, step = 48, 775, 6400, 128
    n_nodes = int(np.ceil((n - 1) / step)) + 1
    sig = rng.standard_normal((n_m, 12000)).astype(np.float32)
    rx = (rng.uniform(200, 2000, (n_g, n_m, 1)) + np.arange(n_nodes) * step * 0.97
          + rng.uniform(-0.5, 0.5, (n_g, n_m, n_nodes)))
    amp = rng.uniform(30, 60, (n_g, n_m, n_nodes)).astype(np.float32)
    chunk = 32
    out = np.empty((chunk, n_m, n), np.float32)
    numba.set_num_threads(threads)
    t0 = time.perf_counter()
    _kernels.dedoppler_cubic(sig, rx[:1].copy(), amp[:1].copy(), step, out[:1])
    compile_s = time.perf_counter() - t0
    best = np.inf
    for _ in range(3):
        t0 = time.perf_counter()
        for c in range(0, n_g, chunk):
            k = min(chunk, n_g - c)
            _kernels.dedoppler_cubic(sig, rx[c:c + k], amp[c:c + k], step, out[:k])
        best = min(best, time.perf_counter() - t0)
    rate = n_m * n_g * n / best
    sub = 4
    t0 = time.perf_counter()
    naive_dedoppler(sig, rx[:sub], amp[:sub], step, n)
    naive_s = time.perf_counter() - t0
    naive_rate = n_m * sub * n / naive_s
    print(f"kernel: first call (compile or cache load) {compile_s:.2f} s")
    print(f"kernel: {rate:.3e} mic*point*sample/s on {threads} thread(s) "
          f"({best:.3f} s per window of {n_m} mics x {n_g} points x {n} samples)")
    print(f"numpy reference: {naive_rate:.3e} mic*point*sample/s; kernel / reference = "
          f"{rate / naive_rate:.0f}x")
    t0 = time.perf_counter()
    for c in range(0, n_g, chunk):
        scipy.fft.rfft(out, axis=-1, workers=threads)
    print(f"band step (rfft of every de-Dopplerized signal): {time.perf_counter() - t0:.3f} s "
          "per window")


def pass_figures(threads: int) -> None:
    demo = ROOT / "demo"
    if not (demo / "data" / "pass-1" / "recording.wav").exists():
        print("demo data missing: run `snakemake --cores 2` once, then re-run this benchmark")
        return
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        shutil.copytree(demo / "data", tmp / "data")
        shutil.copy(demo / "campaign.yaml", tmp / "campaign.yaml")
        text = (tmp / "campaign.yaml").read_text().replace("scenario: scenario.yaml", "")
        (tmp / "campaign.yaml").write_text(text)
        for label, pad_s in (("9 s recording", 0.0), ("padded to 60 s", 51.0)):
            if pad_s:
                _pad_recording(tmp / "data" / "pass-1" / "recording.wav", pad_s)
            out = tmp / "results" / label.replace(" ", "-")
            out.mkdir(parents=True)
            total, peak = 0.0, 0.0
            for stage in ("align", "image", "levels", "qc"):
                wall, mb = measured_stage(stage, tmp / "campaign.yaml", "pass-1", out, threads)
                total, peak = total + wall, max(peak, mb)
                print(f"demo pass-1, {label}, {stage} stage: {wall:.1f} s, peak {mb:.0f} MB")
            n_win = sum(1 for line in (out / "windows.csv").read_text().splitlines()
                        if "analysed" in line)
            print(f"demo pass-1 end to end, {label}: {total:.1f} s for {n_win} windows, "
                  f"peak resident memory {peak:.0f} MB")


def _pad_recording(path: Path, pad_s: float) -> None:
    import soundfile as sf
    data, fs = sf.read(str(path), dtype="float32", always_2d=True)
    pad = np.zeros((int(pad_s * fs), data.shape[1]), np.float32)
    sf.write(str(path), np.concatenate([data, pad]), fs, subtype="FLOAT")


if __name__ == "__main__":
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--threads", type=int, default=2)
    ap.add_argument("--skip-pass", action="store_true")
    args = ap.parse_args()
    kernel_figures(args.threads)
    if not args.skip_pass:
        pass_figures(args.threads)
