"""Reference recording on a second clock for Partita's take-alignment check: the played stream
resampled to a new length by scipy.signal.resample (SciPy reference documentation: Fourier-method
resampling of a periodic signal; the stream starts and ends in silence, so its periodic extension is
harmless). A stream of N frames resampled to M frames is what a recorder whose clock runs M / N times
the player's would capture: recorded frame m holds the played signal at played time m N / M, a skew of
exactly M / N - 1.

Usage: python skewed_playback.py IN.f64 M OUT.f64
"""

import sys

import numpy as np
import scipy
from scipy.signal import resample


def main() -> int:
    x = np.fromfile(sys.argv[1], dtype="<f8")
    m = int(sys.argv[2])
    y = resample(x, m)
    y.astype("<f8").tofile(sys.argv[3])
    print(f"scipy {scipy.__version__}: resample {x.size} -> {m} frames (skew {1e6 * (m / x.size - 1):+.4f} ppm)")
    return 0


if __name__ == "__main__":
    sys.exit(main())
