#!/usr/bin/env python3
"""Scan and tracking captures for the calibration tests, made with numpy
alone (no lobeflow code): a receive-only two-lobe beacon installation whose
lobes have unequal path gains and a beam that is none of lobeflow's models
(a Gaussian main lobe on a broad pedestal, the "shoulder").

Writes, beside this script:
  beacon-scan-sNN.sigmf-meta/-data   scan across a fixed beacon, seed NN
  beacon-scan-sNN.pointing.csv       antenna pointing, time_s,az_deg,el_deg
                                     (telemetry clock = capture clock + 0.25 s)
  beacon-track.sigmf-meta/-data      a separate tracking capture (weaker beacon)
  beacon-track.truth.csv             time_s,az_deg of the target off boresight
  beacon-truth.yaml                  the true installation numbers

  pulsed-scan-s00.wav/.pointing.csv  four-lobe pulsed installation: an
                                     azimuth leg, a slew, an elevation leg
  pulsed-track.wav, .truth.csv       its tracking capture
  pulsed-truth.yaml                  its true numbers

Run: python3 tests/calibration/make_scans.py [--pulsed-only]   (numpy only)

Geometry: azimuth is measured clockwise from north, elevation up from the
horizon. The off-axis angle of a source in the antenna frame is computed
here with rotation matrices: the source's unit vector is rotated by -az
about the vertical and then by -el about the antenna's horizontal axis; the
traverse (cross-elevation) angle is asin of the component along the
antenna's right-hand horizontal axis.
"""
import json
import os

import numpy as np

HERE = os.path.dirname(os.path.abspath(__file__))

# The installation (invented): Harrow Fen two-lobe beacon receiver.
RATE = 4000.0            # S/s, complex
TONE = 1000.0            # Hz, beacon tone offset
DWELL = 0.020            # s
FIRST_START = 0.003      # s, a 'left' dwell starts here
LOBES = ["left", "right"]
SQUINT = 5.0             # deg, lobe axes at -5 (left) and +5 (right)
GAIN_DB = {"left": -0.30, "right": 0.35}   # path gains (amplitude dB)
SHOULDER = 0.12          # pedestal voltage relative to the main lobe
WIDE = 2.6               # pedestal width over main-lobe width
CLOCK_LEAD = 0.25        # s, telemetry clock minus capture clock
SOURCE_AZ, SOURCE_EL = 131.4, 23.0


def main_sigma():
    """Main-lobe sigma giving a 12 deg one-way 3 dB beamwidth (bisection)."""
    lo, hi = 1.0, 20.0
    for _ in range(200):
        mid = 0.5 * (lo + hi)
        if voltage(6.0, mid) ** 2 > 0.5:
            hi = mid
        else:
            lo = mid
    return 0.5 * (lo + hi)


def voltage(x, sigma=None):
    s = SIGMA if sigma is None else sigma
    main = np.exp(-0.5 * (np.asarray(x) / s) ** 2)
    ped = np.exp(-0.5 * (np.asarray(x) / (WIDE * s)) ** 2)
    return (main + SHOULDER * ped) / (1.0 + SHOULDER)


SIGMA = main_sigma()


def rot_z(a):
    c, s = np.cos(a), np.sin(a)
    return np.array([[c, s, 0.0], [-s, c, 0.0], [0.0, 0.0, 1.0]])


def rot_y(a):
    c, s = np.cos(a), np.sin(a)
    return np.array([[c, 0.0, s], [0.0, 1.0, 0.0], [-s, 0.0, c]])


def unit(az_deg, el_deg):
    az, el = np.radians(az_deg), np.radians(el_deg)
    # x north, y east, z up
    return np.array([np.cos(el) * np.cos(az), np.cos(el) * np.sin(az), np.sin(el)])


def traverse_deg(az_p, el_p, az_s, el_s):
    """Source offset toward the antenna's right, degrees."""
    v = rot_y(np.radians(el_p)) @ rot_z(np.radians(az_p)) @ unit(az_s, el_s)
    return np.degrees(np.arcsin(np.clip(v[1], -1.0, 1.0)))


def pointing_for_offset(theta_deg, el_p):
    """Antenna azimuth that puts the fixed source theta_deg right of boresight."""
    lo, hi = SOURCE_AZ - 60.0, SOURCE_AZ + 60.0
    for _ in range(80):  # traverse decreases as the antenna turns right
        mid = 0.5 * (lo + hi)
        if traverse_deg(mid, el_p, SOURCE_AZ, SOURCE_EL) > theta_deg:
            lo = mid
        else:
            hi = mid
    return 0.5 * (lo + hi)


def lobe_index(t):
    k = np.floor((t - FIRST_START) / DWELL).astype(np.int64)
    return np.mod(k, len(LOBES))


def beacon_iq(theta_of_t, n, snr_db, rng):
    """Complex baseband: tone through the switched lobes plus unit-power noise."""
    t = np.arange(n) / RATE
    theta = theta_of_t(t)
    lobe = lobe_index(t)
    axis = np.where(lobe == 1, SQUINT, -SQUINT)
    gain = np.where(lobe == 1, 10 ** (GAIN_DB["right"] / 20), 10 ** (GAIN_DB["left"] / 20))
    amp = np.sqrt(10 ** (snr_db / 10)) * gain * voltage(theta - axis)
    phase0 = rng.uniform(0, 2 * np.pi)
    sig = amp * np.exp(1j * (2 * np.pi * TONE * t + phase0))
    noise = (rng.standard_normal(n) + 1j * rng.standard_normal(n)) / np.sqrt(2)
    return sig + noise, np.sqrt(10 ** (snr_db / 10)) * 10 ** (max(GAIN_DB.values()) / 20)


def write_sigmf(prefix, iq, peak, description):
    scale = 0.9 / (peak + 4.0)  # so nothing clips in 8 bits
    x = np.empty(2 * len(iq))
    x[0::2], x[1::2] = iq.real * scale, iq.imag * scale
    u = np.clip(np.round(x * 128.0 + 128.0), 0, 255).astype(np.uint8)
    u.tofile(prefix + ".sigmf-data")
    meta = {
        "global": {
            "core:datatype": "cu8",
            "core:version": "1.2.0",
            "core:sample_rate": RATE,
            "core:num_channels": 1,
            "core:description": description,
        },
        "captures": [{"core:sample_start": 0, "core:frequency": 432.1e6}],
        "annotations": [],
    }
    with open(prefix + ".sigmf-meta", "w") as f:
        json.dump(meta, f, indent=2)
        f.write("\n")


def beacon_scan(seed, span=15.0, rate_deg_s=1.6, snr_db=30.0):
    rng = np.random.default_rng(1000 + seed)
    duration = 2 * span / rate_deg_s
    n = int(round(duration * RATE))

    def theta_of_t(t):
        return span - rate_deg_s * t  # the antenna turns right across the source

    iq, peak = beacon_iq(theta_of_t, n, snr_db, rng)
    prefix = os.path.join(HERE, f"beacon-scan-s{seed:02d}")
    write_sigmf(prefix, iq, peak, f"calibration scan across a fixed beacon (numpy, seed {seed})")
    # Telemetry at 10 Hz on its own clock, encoder steps of 0.01 deg.
    rows = ["time_s,az_deg,el_deg"]
    for k in range(int(duration * 10) + 1):
        tc = k * 0.1
        az = pointing_for_offset(theta_of_t(tc), SOURCE_EL)
        rows.append(f"{tc + CLOCK_LEAD:.3f},{round(az, 2):.2f},{SOURCE_EL:.2f}")
    with open(prefix + ".pointing.csv", "w") as f:
        f.write("\n".join(rows) + "\n")


def beacon_track(seed=99, duration=20.0, snr_db=21.0):
    rng = np.random.default_rng(seed)
    n = int(round(duration * RATE))

    def theta_of_t(t):
        return -3.0 + 0.35 * t + 0.8 * np.sin(2 * np.pi * t / 7.0)

    iq, peak = beacon_iq(theta_of_t, n, snr_db, rng)
    prefix = os.path.join(HERE, "beacon-track")
    write_sigmf(prefix, iq, peak, "tracking capture of a weaker beacon, same installation (numpy)")
    rows = ["time_s,az_deg"]
    start = FIRST_START - DWELL * np.ceil(FIRST_START / DWELL)
    k = 0
    while True:
        mid = start + (k + 0.5) * DWELL
        k += 1
        if mid < 0:
            continue
        if mid >= duration:
            break
        rows.append(f"{mid:.6f},{theta_of_t(mid):.6f}")
    with open(prefix + ".truth.csv", "w") as f:
        f.write("\n".join(rows) + "\n")


def true_numbers():
    """Slope, crossover and 3 dB width from the pattern itself (fine grid)."""
    g_r, g_l = 10 ** (GAIN_DB["right"] / 20), 10 ** (GAIN_DB["left"] / 20)

    def ratio_db(theta):
        return 20 * np.log10(g_r * voltage(theta - SQUINT) / (g_l * voltage(theta + SQUINT)))

    h = 1e-4
    slope = (ratio_db(h) - ratio_db(-h)) / (2 * h)
    lo, hi = -3.0, 3.0
    for _ in range(100):
        mid = 0.5 * (lo + hi)
        if ratio_db(mid) > 0:
            hi = mid
        else:
            lo = mid
    x = np.linspace(0, 30, 300001)
    bw = 2 * x[np.argmax(voltage(x) ** 2 < 0.5)]
    return {
        "lobe_gain_db": dict(GAIN_DB),
        "imbalance_db": GAIN_DB["right"] - GAIN_DB["left"],
        "ratio_at_boresight_db": float(ratio_db(0.0)),
        "slope_db_per_deg": float(slope),
        "crossover_deg": float(0.5 * (lo + hi)),
        "squint_deg": SQUINT,
        "beamwidth_deg": float(bw),
        "way": "one",
        "pattern": "gaussian main lobe (sigma %.6f deg) plus %.2f pedestal %.1f times wider" % (SIGMA, SHOULDER, WIDE),
        "clock_lead_s": CLOCK_LEAD,
        "source": [SOURCE_AZ, SOURCE_EL],
    }


# ---------------------------------------------------------------------------
# The pulsed four-lobe installation (invented): Tollgate Sands four-lobe
# tracker. WAV 16-bit, channels I, Q and the sync staircase (the level of
# the lobe at position i of N is -0.8 + 1.6 i/(N-1)); lobes switch
# `P_LEAD` before the first transmit of each dwell; the echo is a
# rectangular pulse 2R/c after each transmit; transmit leakage at each
# transmit instant (60 dB over the noise). Lobes see the target through a circular pattern of the
# angle from their own axis, two-way, with their own path gains.
P_RATE = 125000.0
P_PRF = 2000.0
P_PULSE = 3            # samples (24 us)
P_PER_DWELL = 4
P_LEAD = 5             # samples before the first transmit of a dwell
P_T0 = 40              # sample of transmit 0 (first pulse of a 'right' dwell)
P_LOBES = ["right", "up", "left", "down"]
P_AXES = {"right": (2.4, 0.0), "up": (0.0, 2.4), "left": (-2.4, 0.0), "down": (0.0, -2.4)}
P_GAIN_DB = {"right": 0.40, "up": 0.30, "left": -0.35, "down": -0.35}
P_RANGE_M = 30000.0
P_SOURCE = (74.0, 8.0)
P_SHOULDER, P_WIDE = 0.10, 2.4


def p_voltage(r, sigma):
    return (np.exp(-0.5 * (r / sigma) ** 2) + P_SHOULDER * np.exp(-0.5 * (r / (P_WIDE * sigma)) ** 2)) / (1 + P_SHOULDER)


def p_sigma():
    lo, hi = 0.5, 10.0
    for _ in range(200):
        mid = 0.5 * (lo + hi)
        if p_voltage(3.0, mid) ** 2 > 0.5:
            hi = mid
        else:
            lo = mid
    return 0.5 * (lo + hi)


P_SIGMA = p_sigma()


def frame_offsets(az_p, el_p):
    """Source offset (traverse right, elevation up) in the antenna frame, deg."""
    v = rot_y(np.radians(el_p)) @ rot_z(np.radians(az_p)) @ unit(*P_SOURCE)
    return np.degrees(np.arcsin(np.clip(v[1], -1, 1))), np.degrees(np.arctan2(v[2], v[0]))


def pulsed_capture(path, offsets_at, n, snr_db, rng):
    """offsets_at(t) -> (az_off, el_off) of the target; writes the WAV."""
    pri = P_RATE / P_PRF  # 62.5 samples
    delay = 2 * P_RANGE_M / 299792458.0 * P_RATE
    iq = (rng.standard_normal(n) + 1j * rng.standard_normal(n)) / np.sqrt(2)
    sync = np.zeros(n)
    amp0 = np.sqrt(10 ** (snr_db / 10))
    leak = np.sqrt(10 ** (60 / 10))
    k = 0
    while True:
        tx = P_T0 + k * pri
        if tx - pri > n:
            break
        d = k // P_PER_DWELL
        lobe = P_LOBES[d % 4]
        if k % P_PER_DWELL == 0:
            sw = int(np.floor(tx - P_LEAD))
            sync[max(sw, 0):] = -0.8 + 1.6 * (d % 4) / 3
        i0 = int(np.ceil(tx))
        if 0 <= i0 and i0 + P_PULSE <= n:
            iq[i0:i0 + P_PULSE] += leak
        e0 = int(round(tx + delay))
        if 0 <= e0 and e0 + P_PULSE <= n:
            az, el = offsets_at((tx + delay) / P_RATE)
            ax, ay = P_AXES[lobe]
            g = p_voltage(np.hypot(az - ax, el - ay), P_SIGMA) ** 2 * 10 ** (P_GAIN_DB[lobe] / 20)
            iq[e0:e0 + P_PULSE] += amp0 * g * np.exp(1j * rng.uniform(0, 2 * np.pi))
        k += 1
    # Before the first switch the previous lobe ('down') is on.
    first = int(np.floor(P_T0 - P_LEAD))
    sync[:first] = 0.8
    sync += 0.01 * rng.standard_normal(n)
    scale = 0.8 / (leak + 5)
    data = np.stack([iq.real * scale, iq.imag * scale, sync * 0.9], axis=1)
    pcm = np.clip(np.round(data * 32767), -32768, 32767).astype("<i2")
    import wave
    with wave.open(path, "wb") as w:
        w.setnchannels(3)
        w.setsampwidth(2)
        w.setframerate(int(P_RATE))
        w.writeframes(pcm.tobytes())


def pulsed_scan(seed=0, span=7.0, rate=10.0):
    """An azimuth leg, a slew, then an elevation leg across the source."""
    rng = np.random.default_rng(2000 + seed)
    leg = 2 * span / rate
    slew = 0.2
    duration = 2 * leg + slew

    def pointing(t):
        if t < leg:  # az leg: the source from `span` right to `span` left
            return pointing_az(span - rate * t), P_SOURCE[1]
        if t < leg + slew:
            return P_SOURCE[0], P_SOURCE[1] - span
        return P_SOURCE[0], P_SOURCE[1] - (span - rate * (t - leg - slew))

    def pointing_az(theta):
        lo, hi = P_SOURCE[0] - 40, P_SOURCE[0] + 40
        for _ in range(80):
            mid = 0.5 * (lo + hi)
            if frame_offsets(mid, P_SOURCE[1])[0] > theta:
                lo = mid
            else:
                hi = mid
        return 0.5 * (lo + hi)

    n = int(duration * P_RATE)
    prefix = os.path.join(HERE, f"pulsed-scan-s{seed:02d}")
    pulsed_capture(prefix + ".wav", lambda t: frame_offsets(*pointing(t)), n, 38.0, rng)
    rows = ["time_s,az_deg,el_deg"]
    for k in range(int(duration * 20) + 1):
        t = k * 0.05
        az, el = pointing(t)
        rows.append(f"{t:.3f},{az:.4f},{el:.4f}")
    with open(prefix + ".pointing.csv", "w") as f:
        f.write("\n".join(rows) + "\n")


def pulsed_track(duration=5.0):
    rng = np.random.default_rng(77)

    def offsets(t):
        return 0.4 - 0.15 * t + 0.2 * np.sin(2 * np.pi * t / 1.3), -0.4 + 0.15 * t

    n = int(duration * P_RATE)
    pulsed_capture(os.path.join(HERE, "pulsed-track.wav"), offsets, n, 27.0, rng)
    rows = ["time_s,az_deg,el_deg"]
    for k in range(int(duration * 200) + 1):
        t = k * 0.005
        az, el = offsets(t)
        rows.append(f"{t:.4f},{az:.6f},{el:.6f}")
    with open(os.path.join(HERE, "pulsed-track.truth.csv"), "w") as f:
        f.write("\n".join(rows) + "\n")


def pulsed_truth():
    def ratio_db(theta, plus, minus, axis):
        def g(lobe):
            ax, ay = P_AXES[lobe]
            x, y = (theta, 0.0) if axis == 0 else (0.0, theta)
            return p_voltage(np.hypot(x - ax, y - ay), P_SIGMA) ** 2 * 10 ** (P_GAIN_DB[lobe] / 20)
        return 20 * np.log10(g(plus) / g(minus))

    out = {}
    for name, plus, minus, axis in [("az", "right", "left", 0), ("el", "up", "down", 1)]:
        h = 1e-4
        out[f"{name}_imbalance_db"] = P_GAIN_DB[plus] - P_GAIN_DB[minus]
        out[f"{name}_slope_db_per_deg"] = (ratio_db(h, plus, minus, axis) - ratio_db(-h, plus, minus, axis)) / (2 * h)
    x = np.linspace(0, 20, 200001)
    out["beamwidth_deg"] = 2 * x[np.argmax(p_voltage(x, P_SIGMA) ** 2 < 0.5)]
    out["squint_deg"] = 2.4
    return out


def main():
    import sys
    if "--pulsed-only" not in sys.argv:
        for seed in range(24):
            beacon_scan(seed)
        beacon_track()
    pulsed_scan(0)
    pulsed_track()
    with open(os.path.join(HERE, "pulsed-truth.yaml"), "w") as f:
        f.write("# True numbers of the four-lobe pulsed test installation (make_scans.py)\n")
        f.write("lobe_gain_db: \"%s\"\n" % ", ".join(f"{a}={b}" for a, b in P_GAIN_DB.items()))
        for k, v in pulsed_truth().items():
            f.write(f"{k}: {v:.6f}\n")
    if "--pulsed-only" in sys.argv:
        return
    truth = true_numbers()
    with open(os.path.join(HERE, "beacon-truth.yaml"), "w") as f:
        f.write("# True numbers of the two-lobe beacon test installation (make_scans.py)\n")
        for k, v in truth.items():
            if isinstance(v, dict):
                v = ", ".join(f"{a}={b}" for a, b in v.items())
                f.write(f"{k}: \"{v}\"\n")
            elif isinstance(v, list):
                f.write(f"{k}: [{v[0]}, {v[1]}]\n")
            elif isinstance(v, str):
                f.write(f"{k}: \"{v}\"\n")
            else:
                f.write(f"{k}: {v:.6f}\n")
    print(truth)


if __name__ == "__main__":
    main()
