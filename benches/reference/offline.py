"""Reference convolutions timed for Partita's offline benchmark (benches/offline.rs).

Usage: python offline.py MANIFEST.json RESULTS.json

The manifest (written by the bench) lists raw little-endian float32 files: the input channels, and per
case the IR channels and the methods to run. Channel c of the input is convolved with channel c of the IR
(stereo routing L->L, R->R), mode='full'. For each method the script loads and converts the data first,
then times only the convolution calls (time.perf_counter around all channels of one repetition), keeps
the median over the repetitions, and writes the last repetition's outputs (float32, or float64 for the
float64 reference). Methods:

  oaconvolve-f32     scipy.signal.oaconvolve on float32 data (float32 arithmetic)
  fftconvolve-f32    scipy.signal.fftconvolve on float32 data
  numpy-convolve-f32 numpy.convolve on float32 data (direct form)
  fftconvolve-f64    scipy.signal.fftconvolve on float64 copies: the float64 reference

scipy.signal's FFT convolutions run on one thread (scipy.fft's default workers=1). The bench sets
OPENBLAS_NUM_THREADS=1 so numpy.convolve (whose inner dot product may go to BLAS) is single-threaded too.
"""

import json
import sys
import time

import numpy as np
import scipy
import scipy.signal


def method_fn(name):
    if name == "oaconvolve-f32":
        return np.float32, lambda x, h: scipy.signal.oaconvolve(x, h, mode="full")
    if name == "fftconvolve-f32":
        return np.float32, lambda x, h: scipy.signal.fftconvolve(x, h, mode="full")
    if name == "numpy-convolve-f32":
        return np.float32, lambda x, h: np.convolve(x, h, mode="full")
    if name == "fftconvolve-f64":
        return np.float64, lambda x, h: scipy.signal.fftconvolve(x, h, mode="full")
    raise SystemExit(f"unknown method {name}")


def main() -> int:
    with open(sys.argv[1], encoding="utf-8") as f:
        manifest = json.load(f)
    inputs = [np.fromfile(p, dtype="<f4") for p in manifest["inputs"]]
    results = []
    for case in manifest["cases"]:
        ir = [np.fromfile(p, dtype="<f4") for p in case["ir"]]
        for method in case["methods"]:
            dtype, fn = method_fn(method["name"])
            xs = [np.ascontiguousarray(x, dtype=dtype) for x in inputs]
            hs = [np.ascontiguousarray(h, dtype=dtype) for h in ir]
            times = []
            ys = None
            for _ in range(method["reps"]):
                t0 = time.perf_counter()
                ys = [fn(x, h) for x, h in zip(xs, hs)]
                times.append(time.perf_counter() - t0)
            out_dtype = "<f8" if dtype == np.float64 else "<f4"
            for y, path in zip(ys, method["outputs"]):
                assert y.dtype == dtype, f"{method['name']} returned {y.dtype}"
                y.astype(out_dtype).tofile(path)
            results.append(
                {
                    "case": case["name"],
                    "method": method["name"],
                    "seconds": float(np.median(times)),
                    "times": times,
                }
            )
            print(f"  {case['name']:>8} {method['name']:<20} {np.median(times):9.4f} s", file=sys.stderr)
    with open(sys.argv[2], "w", encoding="utf-8") as f:
        json.dump({"numpy": np.__version__, "scipy": scipy.__version__, "results": results}, f)
    return 0


if __name__ == "__main__":
    sys.exit(main())
