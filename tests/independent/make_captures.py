#!/usr/bin/env python3
"""Captures with known truth, made without lobeflow, for its accuracy tests.

Everything here is written from the physics, not from lobeflow's code: the
lobe patterns, the echo sampling, the switch timing and transients, the
noise, and the file formats (WAV through Python's `wave` module, SigMF as
plain JSON plus interleaved int16). Run it from the repository root:

    python3 tests/independent/make_captures.py

It needs numpy only; the outputs are committed, so the tests never run it.
Pattern definitions used:
- Gaussian beam: one-way power pattern exp(-4 ln2 (x/BW)^2), i.e. voltage
  exp(-2 ln2 (x/BW)^2), BW the one-way half-power beamwidth (common practice).
- Cosine-tapered line aperture: voltage cos(pi u) / (1 - 4 u^2), normalised to
  1 at u = 0, u = (D/lambda) sin(x) (e.g. Skolnik, Introduction to Radar
  Systems, 3rd ed., sec. 9.2, from memory); D/lambda is solved here from the
  half-power condition by bisection.
"""

import json
import os
import wave

import numpy as np

OUT = os.path.join(os.path.dirname(os.path.abspath(__file__)), "captures")
C = 299_792_458.0


# ---------------------------------------------------------------- patterns

def gaussian_voltage(off_deg, bw_deg):
    return np.exp(-2.0 * np.log(2.0) * (off_deg / bw_deg) ** 2)


def cosine_taper_voltage(off_deg, bw_deg):
    def g(u):
        u = np.asarray(u, dtype=float)
        d = 1.0 - 4.0 * u * u
        safe = np.where(np.abs(d) < 1e-12, 1.0, d)
        return np.where(np.abs(d) < 1e-12, np.pi / 4.0, np.cos(np.pi * u) / safe)

    lo, hi = 0.0, 1.0  # half-power point u_h: g(u_h)^2 = 1/2
    for _ in range(100):
        mid = 0.5 * (lo + hi)
        if g(mid) ** 2 > 0.5:
            lo = mid
        else:
            hi = mid
    u_half = 0.5 * (lo + hi)
    d_over_lambda = u_half / np.sin(np.radians(bw_deg / 2.0))
    return g(d_over_lambda * np.sin(np.radians(off_deg)))


def off_axis_deg(az, el, lobe_az, lobe_el):
    """Great-circle angle between the target direction and a lobe axis."""
    def unit(a, e):
        a, e = np.radians(a), np.radians(e)
        return np.stack([np.cos(e) * np.cos(a), np.cos(e) * np.sin(a), np.sin(e) * np.ones_like(a)])

    t, l = unit(az, el), unit(lobe_az, lobe_el)
    return np.degrees(np.arccos(np.clip((t * l).sum(axis=0), -1.0, 1.0)))


# ------------------------------------------------------------------ writers

def write_wav_int16(path, rate, channels):
    data = np.stack(channels, axis=1)
    ints = np.clip(np.round(data), -32768, 32767).astype("<i2")
    with wave.open(path, "wb") as w:
        w.setnchannels(len(channels))
        w.setsampwidth(2)
        w.setframerate(int(rate))
        w.writeframes(ints.tobytes())


def write_sigmf_ci16(stem, rate, iq, description):
    ints = np.empty(2 * len(iq), dtype="<i2")
    ints[0::2] = np.clip(np.round(iq.real), -32768, 32767)
    ints[1::2] = np.clip(np.round(iq.imag), -32768, 32767)
    ints.tofile(stem + ".sigmf-data")
    meta = {
        "global": {"core:datatype": "ci16_le", "core:sample_rate": rate, "core:version": "1.0.0",
                   "core:description": description},
        "captures": [{"core:sample_start": 0}],
        "annotations": [],
    }
    with open(stem + ".sigmf-meta", "w") as f:
        json.dump(meta, f, indent=1)


def write_truth(path, times, columns):
    names = ["time_s"] + list(columns)
    with open(path, "w") as f:
        f.write(",".join(names) + "\n")
        for i, t in enumerate(times):
            f.write(",".join([f"{t:.6f}"] + [f"{columns[n][i]:.6f}" for n in columns]) + "\n")


# ---------------------------------------------------------- pulsed captures

PULSED = dict(
    rate=250e3, pri=50, pulse=2.0, pulses_per_dwell=8,
    lobes=[("right", 2.4, 0.0), ("up", 0.0, 2.4), ("left", -2.4, 0.0), ("down", 0.0, -2.4)],
    beamwidth=6.0, snr_db=16.0, leakage_db=35.0, transient_db=15.0, transient_len=2,
    sync_levels=[0.15, 0.35, 0.55, 0.75], sync_ramp=1, lsb_per_unit=300.0, first_tx=37,
)


def pulsed_motion(t):
    az = -0.4 + 0.35 * t
    el = 0.5 * np.sin(2 * np.pi * t / 2.4 + 0.3)
    rng_m = 7200.0 + 30.0 * t
    return az, el, rng_m


def make_pulsed(name, seconds, switch_offset, seed, sync_delay=0):
    """A four-lobe pulsed capture. `switch_offset`: switch instant relative to
    the first transmit instant of each dwell, in samples; `sync_delay`: how
    many samples the sync staircase lags the real switches (a slow line)."""
    p = PULSED
    rng = np.random.default_rng(seed)
    fs, pri, n_tot = p["rate"], p["pri"], int(round(seconds * p["rate"]))
    n = np.arange(n_tot)
    noise = (rng.standard_normal(n_tot) + 1j * rng.standard_normal(n_tot)) / np.sqrt(2.0)  # power 1
    iq = noise.copy()
    tx = np.arange(p["first_tx"], n_tot, pri)
    dwell_of_pulse = np.arange(len(tx)) // p["pulses_per_dwell"]
    # Switch instants: one per dwell start (dwell 0's lobe is active from the start).
    n_dwells = dwell_of_pulse[-1] + 1
    switch_at = np.array([tx[d * p["pulses_per_dwell"]] + switch_offset for d in range(1, n_dwells)])
    lobe_of_dwell = np.arange(n_dwells) % len(p["lobes"])
    # Active lobe per sample (instant switch at switch_at).
    active = np.searchsorted(switch_at, n, side="right") % len(p["lobes"])
    amp = 10 ** (p["snr_db"] / 20.0)
    width = p["pulse"]
    for k, t0 in enumerate(tx):
        # Transmit leakage over the pulse, and the echo from the target.
        iq[t0:t0 + int(width)] += 10 ** (p["leakage_db"] / 20.0) * np.exp(1j * rng.uniform(0, 2 * np.pi))
        az, el, rng_m = pulsed_motion(t0 / fs)
        delay = 2.0 * rng_m / C * fs  # in samples after the transmit instant
        lo = int(np.floor(delay))
        ks = np.arange(lo, lo + int(np.ceil(width)) + 2)
        # Integrate-and-dump sampling of a box echo: overlap of [k, k+1) with [delay, delay+width).
        overlap = np.clip(np.minimum(ks + 1, delay + width) - np.maximum(ks, delay), 0.0, 1.0)
        phase = np.exp(1j * rng.uniform(0, 2 * np.pi))
        for kk, ov in zip(ks, overlap):
            idx = t0 + kk
            if ov <= 0 or idx >= n_tot:
                continue
            _, laz, lel = p["lobes"][active[idx]]
            g = gaussian_voltage(off_axis_deg(az, el, laz, lel), p["beamwidth"])
            iq[idx] += amp * g * g * ov * phase  # two-way: the same lobe transmits and receives
    # Switch transients: a noise burst right after each switch instant.
    for s in switch_at:
        m = np.arange(s, min(s + p["transient_len"], n_tot))
        iq[m] += 10 ** (p["transient_db"] / 20.0) * (rng.standard_normal(len(m)) + 1j * rng.standard_normal(len(m))) / np.sqrt(2)
    # Sync: staircase with a short linear ramp starting at each switch instant.
    levels = np.array(p["sync_levels"])
    sync_at = switch_at + sync_delay
    sync = levels[np.searchsorted(sync_at, n, side="right") % len(p["lobes"])].astype(float)
    for i, s in enumerate(sync_at):
        a, b = levels[(i) % 4], levels[(i + 1) % 4]
        for r in range(p["sync_ramp"]):
            if s + r < n_tot:
                sync[s + r] = a + (b - a) * (r + 0.5) / (p["sync_ramp"] + 1)
    sync += 0.004 * rng.standard_normal(n_tot)
    scale = p["lsb_per_unit"]
    stem = os.path.join(OUT, name)
    write_wav_int16(stem + ".wav", fs, [scale * iq.real, scale * iq.imag, 20000.0 * sync])
    t = np.arange(0.0, seconds, 1e-3)
    az, el, rng_m = pulsed_motion(t)
    write_truth(stem + ".truth.csv", t, {"az_deg": az, "el_deg": el, "range_m": rng_m})
    inside = switch_at[switch_at < n_tot]
    return dict(switches=int(len(inside)), dwells=int(n_dwells), pulses=int(len(tx)),
                noise_power=scale ** 2 / 32768.0 ** 2)


# ----------------------------------------------------------- beacon capture

BEACON = dict(rate=20e3, tone=3137.7, dwell=100, first_start=50, transient=4, beamwidth=12.0, squint=5.0,
              snr_db=4.0, lobes=[("left", -5.0), ("right", 5.0)], dc=0.3, lsb_per_unit=2000.0)


def beacon_motion(t):
    return 0.3 + 1.0 * np.sin(2 * np.pi * t / 6.0), 0.0 * t


def make_beacon(name, seconds, seed):
    p = BEACON
    rng = np.random.default_rng(seed)
    fs, n_tot = p["rate"], int(round(seconds * p["rate"]))
    n = np.arange(n_tot)
    t = n / fs
    az, el = beacon_motion(t)
    # Lobe schedule: left's dwells start at first_start + 2k dwell.
    lobe = ((n - p["first_start"]) // p["dwell"]) % 2
    lobe_az = np.array([l[1] for l in p["lobes"]])[lobe]
    g = cosine_taper_voltage(off_axis_deg(az, el, lobe_az, 0.0 * lobe_az), p["beamwidth"])
    amp = 10 ** (p["snr_db"] / 20.0)  # tone power over noise power per sample on the lobe axis
    tone = amp * g * np.exp(1j * (2 * np.pi * p["tone"] * t + 0.7))  # one-way: receive-only switching
    noise = (rng.standard_normal(n_tot) + 1j * rng.standard_normal(n_tot)) / np.sqrt(2.0)
    iq = tone + noise + p["dc"]
    # Switch transient: the first samples after each switch are garbage.
    starts = np.arange(p["first_start"] % p["dwell"], n_tot, p["dwell"])
    for s in starts:
        m = np.arange(s, min(s + p["transient"], n_tot))
        iq[m] += 3.0 * (rng.standard_normal(len(m)) + 1j * rng.standard_normal(len(m)))
    stem = os.path.join(OUT, name)
    write_sigmf_ci16(stem, fs, p["lsb_per_unit"] * iq, "independent two-lobe beacon capture, tone off the bin grid")
    tt = np.arange(0.0, seconds, 1e-3)
    az_t, el_t = beacon_motion(tt)
    write_truth(stem + ".truth.csv", tt, {"az_deg": az_t, "el_deg": el_t})
    return dict(dwells=int(len(starts)), noise_power=(p["lsb_per_unit"] / 32768.0) ** 2)


def write_pattern(path, bw_deg):
    """The pulsed rig's true one-way pattern as a measured-pattern table."""
    x = np.round(np.arange(-15.0, 15.0001, 0.1), 1)
    gain_db = 20.0 * np.log10(gaussian_voltage(x, bw_deg))
    with open(path, "w") as f:
        f.write("angle_deg,gain_db\n")
        for a, g in zip(x, gain_db):
            f.write(f"{a:.1f},{g:.5f}\n")


def main():
    os.makedirs(OUT, exist_ok=True)
    write_pattern(os.path.join(OUT, "pulsed-pattern.csv"), PULSED["beamwidth"])
    info = {
        "pulsed_switch_at_transmit": make_pulsed("pulsed-switch-at-transmit", 2.6, 0, 101),
        "pulsed_switch_in_tail": make_pulsed("pulsed-switch-in-tail", 2.6, -4, 102),
        "pulsed_switch_in_echo": make_pulsed("pulsed-switch-in-echo", 0.4, 12, 103),
        "beacon_off_grid": make_beacon("beacon-off-grid", 21.0, 104),
        # the sync staircase one pulse interval (50 samples) behind the switches
        "pulsed_sync_late": make_pulsed("pulsed-sync-late", 0.6, -4, 105, sync_delay=50),
        "pulsed": PULSED,
        "beacon": BEACON,
    }
    with open(os.path.join(OUT, "captures.json"), "w") as f:
        json.dump(info, f, indent=1, default=float)


if __name__ == "__main__":
    main()
