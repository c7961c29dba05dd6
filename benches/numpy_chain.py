#!/usr/bin/env python3
"""A straightforward numpy/scipy four-lobe pulsed chain, the yardstick of the
budget bench (benches/budget.rs): what a researcher would write by hand for
the same job as graphs/four-lobe-pulsed.yaml. Shares no code with lobeflow.

    python3 benches/numpy_chain.py CAPTURE.wav OUT.csv

CAPTURE: WAV float32 with I, Q and the sync staircase (as `lobeflow synth`
writes for samples/four-lobe-pulsed.scenario.yaml). Writes one row per lobe
cycle: time_s, az_deg, el_deg (smoothed), and prints their means.

The steps, all vectorised: power; transmit instants where the leakage rises
30 dB over the median floor; one sweep per transmit instant; lobe from the
sync level in the sweep (lowest level = first lobe of right, up, left,
down); per dwell the sweeps summed; the echo found in the first dwells and
gated 5 range bins wide, noise from 15-23 km subtracted; az/el from the log
ratio of opposite lobes through a Gaussian two-way beam (common practice:
ln(P+/P-) = 32 ln2 s theta / bw^2 for one-way 3 dB beamwidth bw and squint s);
a moving-average smoother over 9 cycles.
"""

import struct
import sys

import numpy as np

try:
    from scipy.ndimage import uniform_filter1d
except ImportError:  # the chain still runs; the bench says which
    uniform_filter1d = None

C = 299_792_458.0
PRF = 4000.0
BLANK_S = 6e-6
SEARCH = (1e3, 15e3)
NOISE = (15e3, 23e3)
GATE_BINS = 5
BEAMWIDTH, SQUINT = 6.0, 2.4
LOBES = ["right", "up", "left", "down"]


def read_wav_f32(path):
    """(rate, frames x channels float32) from a WAV float file, chunk by chunk."""
    with open(path, "rb") as f:
        head = f.read(12)
        if head[:4] != b"RIFF" or head[8:12] != b"WAVE":
            sys.exit(f"{path}: not a WAV file")
        rate = channels = None
        while True:
            hdr = f.read(8)
            if len(hdr) < 8:
                sys.exit(f"{path}: no data chunk")
            tag, size = hdr[:4], struct.unpack("<I", hdr[4:])[0]
            if tag == b"fmt ":
                fmt = f.read(size)
                channels, rate = struct.unpack("<HI", fmt[2:8])
                bits = struct.unpack("<H", fmt[14:16])[0]
                if bits != 32:
                    sys.exit(f"{path}: {bits}-bit samples, expected float32")
            elif tag == b"data":
                data = np.fromfile(f, dtype="<f4", count=size // 4)
                return rate, data.reshape(-1, channels)
            else:
                f.seek(size + (size & 1), 1)


def main():
    if len(sys.argv) != 3:
        sys.exit(__doc__)
    rate, frames = read_wav_f32(sys.argv[1])
    power = frames[:, 0] ** 2 + frames[:, 1] ** 2
    sync = frames[:, 2]

    floor = np.median(power[:: max(1, len(power) // 100_000)])
    hot = power > floor * 10 ** 3.0
    rises = np.flatnonzero(hot[1:] & ~hot[:-1]) + 1
    pri = int(round(rate / PRF))
    # One transmit instant per pulse: drop rises within half a PRI of the last kept.
    keep = [rises[0]] if len(rises) else []
    for r in rises[1:]:
        if r - keep[-1] > pri // 2:
            keep.append(r)
    starts = np.array(keep)
    starts = starts[starts + pri <= len(power)]
    sweeps = power[starts[:, None] + np.arange(pri)[None, :]]
    sweeps[:, : int(BLANK_S * rate)] = 0.0

    mid = sync[starts + pri // 2]
    # Evenly spaced sync levels, lowest = first lobe (the staircase is noisy).
    lo, hi = np.percentile(mid, [1, 99])
    lobe = np.clip(np.round((mid - lo) / (hi - lo) * (len(LOBES) - 1)), 0, len(LOBES) - 1).astype(int)

    # Dwells: runs of sweeps with one lobe.
    edges = np.flatnonzero(np.diff(lobe)) + 1
    bounds = np.concatenate(([0], edges, [len(lobe)]))
    dwell_power = np.add.reduceat(sweeps, bounds[:-1], axis=0)
    dwell_lobe = lobe[bounds[:-1]]
    dwell_time = starts[bounds[:-1]] / rate

    bin_of = lambda r: int(2 * r / C * rate)
    s0, s1 = bin_of(SEARCH[0]), bin_of(SEARCH[1])
    peak = s0 + int(np.argmax(dwell_power[:8, s0:s1].sum(axis=0)))
    gate = slice(peak - GATE_BINS // 2, peak + GATE_BINS // 2 + 1)
    n0, n1 = bin_of(NOISE[0]), bin_of(NOISE[1])
    noise = dwell_power[:, n0:n1].mean(axis=1)
    energy = np.maximum(dwell_power[:, gate].sum(axis=1) - GATE_BINS * noise, 1e-30)

    # Whole lobe cycles starting at the first lobe.
    first = int(np.argmax(dwell_lobe == 0))
    n = (len(energy) - first) // 4
    cyc = energy[first : first + 4 * n].reshape(n, 4)
    ok = (dwell_lobe[first : first + 4 * n].reshape(n, 4) == np.arange(4)).all(axis=1)
    k = BEAMWIDTH**2 / (32 * np.log(2) * SQUINT)
    az = k * np.log(cyc[:, 0] / cyc[:, 2])
    el = k * np.log(cyc[:, 1] / cyc[:, 3])
    t = dwell_time[first : first + 4 * n : 4]
    az, el, t = az[ok], el[ok], t[ok]
    if uniform_filter1d is not None:
        az, el = uniform_filter1d(az, 9), uniform_filter1d(el, 9)
    np.savetxt(sys.argv[2], np.column_stack([t, az, el]), fmt="%.6f", delimiter=",", header="time_s,az_deg,el_deg", comments="")
    print(f"{len(t)} cycles, mean az {az.mean():.3f} deg, mean el {el.mean():.3f} deg")


if __name__ == "__main__":
    main()
