"""Reference for `partita render`: numpy.convolve(x, h, mode='full') in float64 on the WAV files themselves.

Usage: python render_convolve.py MANIFEST.json

The manifest names the input WAV, the IR WAV, the routing paths [input channel, output channel, IR channel]
and one raw little-endian float64 file to write per output channel. Both WAVs are read with soundfile
(libsndfile), not with Partita's reader, as float64 (32-bit float samples are exact in float64). Each output
is the sum over its paths of numpy.convolve(x[input], h[ir_channel], mode='full'), length M + L - 1.
"""

import json
import sys

import numpy as np
import soundfile as sf


def main() -> int:
    with open(sys.argv[1], encoding="utf-8") as f:
        manifest = json.load(f)
    x, x_rate = sf.read(manifest["input"], dtype="float64", always_2d=True)
    h, h_rate = sf.read(manifest["ir"], dtype="float64", always_2d=True)
    if x_rate != h_rate:
        print(f"rates differ: input {x_rate} Hz, IR {h_rate} Hz", file=sys.stderr)
        return 1
    length = x.shape[0] + h.shape[0] - 1
    outputs = [np.zeros(length, dtype=np.float64) for _ in manifest["outputs"]]
    for i, o, c in manifest["paths"]:
        outputs[o] += np.convolve(x[:, i], h[:, c], mode="full")
    for y, path in zip(outputs, manifest["outputs"]):
        y.astype("<f8").tofile(path)
    print(
        f"numpy {np.__version__}, soundfile {sf.__version__}: input {x.shape[1]} ch x {x.shape[0]}, "
        f"IR {h.shape[1]} ch x {h.shape[0]}, {len(manifest['paths'])} paths, {length} frames"
    )
    return 0


if __name__ == "__main__":
    sys.exit(main())
