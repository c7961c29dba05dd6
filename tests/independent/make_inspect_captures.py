#!/usr/bin/env python3
"""Captures whose installation numbers `lobeflow inspect` must find.

Written from the physics with numpy alone and sharing no code with lobeflow
(nor with make_captures.py beside it): its own beam patterns, pulse and echo
sampling, switch timing, transients, noise and file writers. Run from the
repository root:

    python3 tests/independent/make_inspect_captures.py

Outputs go to tests/independent/inspect/ (committed, a few MB), each capture
with `<name>.truth.csv` (time_s,az_deg[,el_deg]) and its installation numbers
in `truth.json`. The PRFs and switch rates are chosen to be awkward for an
envelope decimated to 8 kS/s: 6.25 kHz aliases to 1.75 kHz, 4.1 kHz to
3.9 kHz, and a 400 Hz switch train made of short transients has harmonics as
strong as its fundamental. `beacon-drift` has a switch clock whose dwell
(5.004 ms) is 0.08 % longer than the 5 ms a schedule would assume.

Patterns (common practice, from memory):
- Gaussian beam, one-way voltage exp(-2 ln2 (x/BW)^2), BW the one-way
  half-power beamwidth.
- Cosine-tapered line aperture, voltage cos(pi u)/(1 - 4u^2) with
  u = (D/lambda) sin x, D/lambda set so the power is 1/2 at x = BW/2.
"""

import json
import os
import struct

import numpy as np

HERE = os.path.dirname(os.path.abspath(__file__))
OUT = os.path.join(HERE, "inspect")
LIGHT = 299_792_458.0


def gauss_beam(off, bw):
    return np.exp(-2.0 * np.log(2.0) * (off / bw) ** 2)


def taper_beam(off, bw):
    def volt(u):
        den = 1.0 - 4.0 * u * u
        near = np.abs(den) < 1e-9
        return np.where(near, np.pi / 4.0, np.cos(np.pi * u) / np.where(near, 1.0, den))

    # half-power point of volt(u) by Newton-free halving
    a, b = 0.0, 1.0
    for _ in range(80):
        m = (a + b) / 2.0
        a, b = (m, b) if volt(np.array(m)) ** 2 > 0.5 else (a, m)
    aperture = ((a + b) / 2.0) / np.sin(np.radians(bw / 2.0))
    return volt(aperture * np.sin(np.radians(off)))


def angle_between(az, el, laz, lel):
    """Angle (deg) between two directions given as azimuth/elevation."""
    az, el, laz, lel = (np.radians(v) for v in (az, el, laz, lel))
    c = np.sin(el) * np.sin(lel) + np.cos(el) * np.cos(lel) * np.cos(az - laz)
    return np.degrees(np.arccos(np.clip(c, -1.0, 1.0)))


def riff_int16(path, rate, columns):
    """A PCM WAV file written byte by byte (interleaved int16 channels)."""
    data = np.stack([np.clip(np.round(c), -32767, 32767) for c in columns], axis=1).astype("<i2").tobytes()
    ch = len(columns)
    header = b"RIFF" + struct.pack("<I", 36 + len(data)) + b"WAVE"
    header += b"fmt " + struct.pack("<IHHIIHH", 16, 1, ch, int(rate), int(rate) * 2 * ch, 2 * ch, 16)
    header += b"data" + struct.pack("<I", len(data))
    with open(path, "wb") as f:
        f.write(header + data)


def sigmf_ci16(stem, rate, iq, note, annotations=()):
    inter = np.empty(2 * len(iq))
    inter[0::2], inter[1::2] = iq.real, iq.imag
    np.clip(np.round(inter), -32767, 32767).astype("<i2").tofile(stem + ".sigmf-data")
    meta = {
        "global": {"core:datatype": "ci16_le", "core:sample_rate": rate, "core:version": "1.0.0",
                   "core:description": note},
        "captures": [{"core:sample_start": 0}],
        "annotations": list(annotations),
    }
    with open(stem + ".sigmf-meta", "w") as f:
        json.dump(meta, f, indent=1)


def truth_csv(path, t, cols):
    names = list(cols)
    with open(path, "w") as f:
        f.write("time_s," + ",".join(names) + "\n")
        for i, ti in enumerate(t):
            f.write(f"{ti:.6f}," + ",".join(f"{cols[n][i]:.6f}" for n in names) + "\n")


# ------------------------------------------------------------ pulsed rigs

FOUR = [("right", 2.4, 0.0), ("up", 0.0, 2.4), ("left", -2.4, 0.0), ("down", 0.0, -2.4)]


def pulsed(name, seconds, rate, prf, pulse_s, per_dwell, range0, with_sync, seed, jitter_s=0.0):
    rng = np.random.default_rng(seed)
    n = int(seconds * rate)
    iq = (rng.standard_normal(n) + 1j * rng.standard_normal(n)) / np.sqrt(2.0)
    first = 23.0 / rate
    tx_t = first + np.arange(int((seconds - first) * prf)) / prf
    tx_t = tx_t + jitter_s * rng.uniform(-1.0, 1.0, len(tx_t))
    tx = np.round(tx_t * rate).astype(int)
    tx = tx[tx + int(rate / prf) < n]
    width = pulse_s * rate
    dwell_of = np.arange(len(tx)) // per_dwell
    lobe_of_pulse = dwell_of % 4
    # Switch 2 samples before the first transmit instant of each dwell.
    switches = tx[per_dwell::per_dwell] - 2
    lobe_at = np.searchsorted(switches, np.arange(n), side="right") % 4
    leak = 10 ** (42 / 20.0)
    echo_amp = 10 ** (13 / 20.0)
    for k, t0 in enumerate(tx):
        t = t0 / rate
        az, el, rm = -0.3 + 0.5 * t, 0.4 * np.sin(2 * np.pi * t / 0.8), range0 + 40.0 * t
        # leakage: a box of the pulse length with a fractional last sample
        cover = np.clip(width - np.arange(int(np.ceil(width))), 0.0, 1.0)
        iq[t0:t0 + len(cover)] += leak * cover * np.exp(2j * np.pi * rng.uniform())
        _, laz, lel = FOUR[lobe_of_pulse[k]]
        g = gauss_beam(angle_between(az, el, laz, lel), 6.0) ** 2
        d = 2.0 * rm / LIGHT * rate
        cells = np.arange(int(d), int(d) + int(np.ceil(width)) + 2)
        part = np.clip(np.minimum(cells + 1, d + width) - np.maximum(cells, d), 0.0, 1.0)
        iq[t0 + cells] += echo_amp * g * part * np.exp(2j * np.pi * rng.uniform())
    for s in switches:
        iq[s:s + 2] += 10 ** (16 / 20.0) * (rng.standard_normal(2) + 1j * rng.standard_normal(2))
    cols = [250.0 * iq.real, 250.0 * iq.imag]
    levels = [-0.55, -0.2, 0.15, 0.5]
    if with_sync:
        sync = np.array(levels)[lobe_at] + 0.01 * rng.standard_normal(n)
        cols.append(26000.0 * sync)
    riff_int16(os.path.join(OUT, name + ".wav"), rate, cols)
    tt = np.arange(0.0, seconds, 1e-3)
    truth_csv(os.path.join(OUT, name + ".truth.csv"), tt,
              {"az_deg": -0.3 + 0.5 * tt, "el_deg": 0.4 * np.sin(2 * np.pi * tt / 0.8),
               "range_m": range0 + 40.0 * tt})
    rm = range0 + 40.0 * np.array([0.0, seconds])
    return {
        "kind": "pulsed", "rate": rate, "prf_hz": prf, "pri_jitter_s": jitter_s, "pulse_s": pulse_s,
        "dwell_pulses": per_dwell, "lobes": 4, "lobe_order": "right,up,left,down",
        "first_transmit_s": float(tx[0] / rate), "first_switch_s": float(switches[0] / rate),
        "echo_range_m": [float(rm[0]), float(rm[1] + pulse_s * LIGHT / 2)],
        "sync_levels": [v * 26000.0 / 32768.0 for v in levels] if with_sync else None,
        "transient_delay_s": float((switches[0] - tx[per_dwell - 1]) / rate),
    }


# ------------------------------------------------------------ beacon rigs

def beacon(name, seconds, rate, tone, dwell_s, first_start_s, snr_db, transient, steps_db, seed, label=None):
    rng = np.random.default_rng(seed)
    n = int(seconds * rate)
    t = np.arange(n) / rate
    az = 0.6 + 0.8 * np.sin(2 * np.pi * t / 1.7)
    lobe = np.floor((t - first_start_s) / dwell_s).astype(int) % 2  # 0 left, 1 right
    laz = np.where(lobe == 0, -5.0, 5.0)
    gain = taper_beam(angle_between(az, 0.0, laz, 0.0), 12.0)
    amp = 10 ** (snr_db / 20.0)
    iq = amp * gain * np.exp(1j * (2 * np.pi * tone * t + 1.1))
    iq += (rng.standard_normal(n) + 1j * rng.standard_normal(n)) / np.sqrt(2.0)
    iq += 0.25 - 0.1j  # receiver DC offset
    k0 = int(np.ceil(-first_start_s / dwell_s))
    starts = np.round((first_start_s + np.arange(k0, int(seconds / dwell_s) + 2) * dwell_s) * rate).astype(int)
    starts = starts[(starts >= 0) & (starts < n)]
    for s in starts:
        m = slice(s, min(s + transient, n))
        size = iq[m].shape[0]
        iq[m] += 10 ** (steps_db / 20.0) * (rng.standard_normal(size) + 1j * rng.standard_normal(size))
    notes = []
    if label is not None:
        # one dwell labelled with its lobe, as a logger marking the antenna state would
        k = int(np.ceil((label - first_start_s) / (2 * dwell_s)))
        at = int(round((first_start_s + 2 * k * dwell_s) * rate))
        notes.append({"core:sample_start": at, "core:sample_count": int(round(dwell_s * rate)), "core:label": "left"})
    sigmf_ci16(os.path.join(OUT, name), rate, 1500.0 * iq, "independent beacon capture for inspect", notes)
    tt = np.arange(0.0, seconds, 1e-3)
    truth_csv(os.path.join(OUT, name + ".truth.csv"), tt, {"az_deg": 0.6 + 0.8 * np.sin(2 * np.pi * tt / 1.7)})
    return {
        "kind": "beacon", "rate": rate, "tone_hz": tone, "dwell_s": dwell_s, "first_start_s": first_start_s,
        "lobe_order": "left,right", "tone_snr_db_per_sample": snr_db,
    }


def beacon_with_sync(name, seconds, rate, tone, dwell_s, first_start_s, sync_lag_s, seed):
    """A two-lobe beacon whose third channel is the switch's sync staircase,
    recorded `sync_lag_s` after the antenna really switches (0: on time)."""
    rng = np.random.default_rng(seed)
    n = int(seconds * rate)
    t = np.arange(n) / rate
    az = 0.6 + 0.8 * np.sin(2 * np.pi * t / 1.7)
    lobe = np.floor((t - first_start_s) / dwell_s).astype(int) % 2  # 0 left, 1 right
    gain = taper_beam(angle_between(az, 0.0, np.where(lobe == 0, -5.0, 5.0), 0.0), 12.0)
    iq = 10 ** (6.0 / 20.0) * gain * np.exp(1j * (2 * np.pi * tone * t + 0.4))
    iq += (rng.standard_normal(n) + 1j * rng.standard_normal(n)) / np.sqrt(2.0)
    sync_lobe = np.floor((t - first_start_s - sync_lag_s) / dwell_s).astype(int) % 2
    # the staircase ramps over two samples from one level to the next, as a slow line driver would
    levels = np.array([-0.4, 0.3])[sync_lobe]
    sync = np.convolve(levels, [0.5, 0.5])[:n] + 0.01 * rng.standard_normal(n)
    riff_int16(os.path.join(OUT, name + ".wav"), rate, [1500.0 * iq.real, 1500.0 * iq.imag, 26000.0 * sync])
    tt = np.arange(0.0, seconds, 1e-3)
    truth_csv(os.path.join(OUT, name + ".truth.csv"), tt, {"az_deg": 0.6 + 0.8 * np.sin(2 * np.pi * tt / 1.7)})
    return {
        "kind": "beacon", "rate": rate, "tone_hz": tone, "dwell_s": dwell_s, "first_start_s": first_start_s,
        "lobe_order": "left,right", "sync_lag_s": sync_lag_s,
    }


def main():
    os.makedirs(OUT, exist_ok=True)
    truth = {
        "pulsed-sync-6k25": pulsed("pulsed-sync-6k25", 0.5, 400e3, 6250.0, 5e-6, 4, 9000.0, True, 11),
        "pulsed-blind-4k1": pulsed("pulsed-blind-4k1", 0.5, 400e3, 4100.0, 7.5e-6, 6, 14000.0, False, 12,
                                   jitter_s=1e-6),
        "beacon-schedule": beacon("beacon-schedule", 2.4, 48e3, 9876.5, 0.020, -0.007, 6.0, 3, 6.0, 13),
        "beacon-blind": beacon("beacon-blind", 2.0, 64e3, -6432.1, 0.0025, 0.0009, 3.0, 6, 14.0, 14, label=1.0),
        # a switch clock 0.08 % slow: a schedule of 5 ms dwells drifts by 1.9 ms (38 % of a dwell) over the capture
        "beacon-drift": beacon("beacon-drift", 2.4, 48e3, 4321.0, 0.005004, 0.0012, 6.0, 4, 10.0, 15),
        # a sync staircase a quarter dwell (1.25 ms) behind the antenna's switches, and its on-time twin
        "lagging-sync-beacon": beacon_with_sync("lagging-sync-beacon", 1.2, 48e3, 3456.0, 0.005, 0.0012, 0.00125, 16),
        "on-time-sync-beacon": beacon_with_sync("on-time-sync-beacon", 1.2, 48e3, 3456.0, 0.005, 0.0012, 0.0, 17),
    }
    with open(os.path.join(OUT, "truth.json"), "w") as f:
        json.dump(truth, f, indent=1)


if __name__ == "__main__":
    main()
