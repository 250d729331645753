"""Reference WAV reader and writer for Partita's cross-checks: soundfile (libsndfile) and scipy.io.wavfile.

Usage: python wav_soundfile.py JOBS.txt

Each line of JOBS.txt is one job, fields separated by tabs:

  read        IN.wav  OUT.f64   soundfile.read(IN, dtype='float64'); integer PCM reads as value / 2^(bits-1)
  read-scipy  IN.wav  OUT.f64   scipy.io.wavfile.read(IN), scaled to the same convention (see below)
  write       SUBTYPE  FORMAT  RATE  CHANNELS  IN.f64  OUT.wav
                                soundfile.write(OUT, data, RATE, subtype=SUBTYPE, format=FORMAT)

Sample data is exchanged as raw little-endian float64, planar (all of channel 0, then channel 1, ...).
Each read also writes OUT.f64.txt: "channels frames rate detail" (detail: soundfile's subtype and format, or
scipy's dtype).
"""

import sys

import numpy as np
import scipy
import scipy.io.wavfile
import soundfile as sf


def write_planar(path: str, data: np.ndarray) -> None:
    # data: (frames, channels) -> planar float64 little-endian.
    np.ascontiguousarray(data.T, dtype="<f8").tofile(path)


def read_sf(src: str, out: str) -> str:
    data, rate = sf.read(src, dtype="float64", always_2d=True)
    info = sf.info(src)
    write_planar(out, data)
    with open(out + ".txt", "w", encoding="utf-8") as f:
        f.write(f"{data.shape[1]} {data.shape[0]} {rate} {info.subtype} {info.format}\n")
    return f"read {src}: {info.format}/{info.subtype}, {data.shape[1]} ch, {data.shape[0]} frames"


def read_scipy(src: str, out: str) -> str:
    rate, data = scipy.io.wavfile.read(src)
    dtype = str(data.dtype)
    if data.ndim == 1:
        data = data[:, None]
    # scipy returns raw integers: uint8 (offset 128), int16, int32 (24-bit data in the top 24 bits); floats as is.
    if data.dtype == np.uint8:
        scaled = (data.astype(np.float64) - 128.0) / 128.0
    elif data.dtype == np.int16:
        scaled = data.astype(np.float64) / 2.0**15
    elif data.dtype == np.int32:
        scaled = data.astype(np.float64) / 2.0**31
    elif data.dtype.kind == "f":
        scaled = data.astype(np.float64)
    else:
        raise SystemExit(f"unexpected scipy dtype {data.dtype} for {src}")
    write_planar(out, scaled)
    with open(out + ".txt", "w", encoding="utf-8") as f:
        f.write(f"{scaled.shape[1]} {scaled.shape[0]} {rate} {dtype}\n")
    return f"read-scipy {src}: {dtype}, {scaled.shape[1]} ch, {scaled.shape[0]} frames"


def write_sf(subtype: str, fmt: str, rate: str, channels: str, src: str, out: str) -> str:
    ch = int(channels)
    planar = np.fromfile(src, dtype="<f8").reshape(ch, -1)
    sf.write(out, planar.T, int(rate), subtype=subtype, format=fmt)
    return f"write {out}: {fmt}/{subtype}, {ch} ch, {planar.shape[1]} frames"


def main() -> int:
    with open(sys.argv[1], encoding="utf-8") as f:
        jobs = [line.rstrip("\n").split("\t") for line in f if line.strip()]
    for job in jobs:
        kind, args = job[0], job[1:]
        if kind == "read":
            print(read_sf(*args))
        elif kind == "read-scipy":
            print(read_scipy(*args))
        elif kind == "write":
            print(write_sf(*args))
        else:
            raise SystemExit(f"unknown job {kind!r}")
    print(f"soundfile {sf.__version__} (libsndfile {sf.__libsndfile_version__}), scipy {scipy.__version__}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
