"""Reference convolution for Partita's cross-checks: numpy.convolve(..., mode='full') in float64.

Usage: python convolve.py MANIFEST.json

The manifest lists raw little-endian float32 files for the inputs and IR channels, the routing paths
(input, output, ir_channel) and the float64 output files to write. Each output is the sum over its paths
of numpy.convolve(x_input, h_channel, mode='full'), computed in float64.
"""

import json
import sys

import numpy as np


def main() -> int:
    with open(sys.argv[1], encoding="utf-8") as f:
        manifest = json.load(f)
    inputs = [np.fromfile(p, dtype="<f4").astype(np.float64) for p in manifest["inputs"]]
    ir = [np.fromfile(p, dtype="<f4").astype(np.float64) for p in manifest["ir"]]
    length = len(inputs[0]) + len(ir[0]) - 1
    outputs = [np.zeros(length, dtype=np.float64) for _ in manifest["outputs"]]
    for i, o, c in manifest["paths"]:
        outputs[o] += np.convolve(inputs[i], ir[c], mode="full")
    for y, path in zip(outputs, manifest["outputs"]):
        y.astype("<f8").tofile(path)
    print(f"numpy {np.__version__}: {len(manifest['paths'])} paths, {length} frames")
    return 0


if __name__ == "__main__":
    sys.exit(main())
