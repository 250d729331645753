"""Reference exponential sweep for Partita's sweep check: scipy.signal.chirp(t, f0, t1, f1,
method='logarithmic', phi=-90) in float64 (SciPy reference documentation, scipy.signal.chirp: the
logarithmic chirp is cos(2 pi f0 t1 / ln(f1 / f0) ((f1 / f0)^(t / t1) - 1) + phi), so phi = -90 degrees
gives the sine of Farina's phase).

Usage: python sweep_chirp.py SAMPLE_RATE F0 F1 T1 FRAMES OUT.f64
"""

import sys

import numpy as np
import scipy
from scipy.signal import chirp


def main() -> int:
    fs, f0, f1, t1 = (float(v) for v in sys.argv[1:5])
    frames = int(sys.argv[5])
    t = np.arange(frames, dtype=np.float64) / fs
    y = chirp(t, f0=f0, t1=t1, f1=f1, method="logarithmic", phi=-90)
    y.astype("<f8").tofile(sys.argv[6])
    print(f"scipy {scipy.__version__}: chirp {f0} Hz to {f1} Hz over {t1} s, {frames} frames")
    return 0


if __name__ == "__main__":
    sys.exit(main())
