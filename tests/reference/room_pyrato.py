"""Reference decay parameters for Partita's analysis check: pyrato 1.1.0 on pyfar 0.8.1.

Usage: python room_pyrato.py SAMPLE_RATE OUT.json IN0.f64 [IN1.f64 ...]

Each input is one band-filtered impulse response (raw little-endian float64), filtered by Partita and
starting at Partita's onset for that band, so the filter design and the onset convention stay out of the
comparison. For each: the energy decay curve with Lundeby's noise handling
(pyrato.edc.energy_decay_curve_lundeby, channel_independent=True, time_shift=False, normalize=True), then
pyrato.parameters.reverberation_time_linear_regression for T20 and T30, and pyrato.parameters.clarity
(C50, C80), definition (D50) and center_time on that curve. Writes one JSON object per input.
"""

import json
import sys
import warnings

import numpy as np
import pyfar as pf
import pyrato


def main() -> int:
    fs = float(sys.argv[1])
    results = []
    for path in sys.argv[3:]:
        x = np.fromfile(path, dtype="<f8")
        sig = pf.Signal(x, fs)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            edc = pyrato.edc.energy_decay_curve_lundeby(
                sig, channel_independent=True, time_shift=False, normalize=True
            )
            row = {}
            for name in ("T20", "T30"):
                row[name] = float(np.ravel(pyrato.parameters.reverberation_time_linear_regression(edc, T=name))[0])
            row["C50"] = float(np.ravel(pyrato.parameters.clarity(edc, early_time_limit=50))[0])
            row["C80"] = float(np.ravel(pyrato.parameters.clarity(edc, early_time_limit=80))[0])
            row["D50"] = float(np.ravel(pyrato.parameters.definition(edc, early_time_limit=50))[0])
            row["Ts"] = float(np.ravel(pyrato.parameters.center_time(edc))[0])
        results.append(row)
    with open(sys.argv[2], "w", encoding="utf-8") as f:
        json.dump(results, f)
    print(f"pyrato {pyrato.__version__}, pyfar {pf.__version__}: {len(results)} responses")
    return 0


if __name__ == "__main__":
    sys.exit(main())
