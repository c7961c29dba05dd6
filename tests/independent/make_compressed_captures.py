#!/usr/bin/env python3
"""A pulsed four-lobe capture for the matched-filter chain, made without lobeflow.

Written from the physics for the single-sample-limit test of
`graphs/four-lobe-compressed-dos.yaml`; it shares no code with lobeflow nor
with `make_captures.py`: its own lobe pattern (a line aperture with a
cosine-squared-on-pedestal illumination, integrated numerically), its own
echo sampling, switch timing, transients, sync staircase and noise, and its
own RIFF writer. Run from the repository root:

    python3 tests/independent/make_compressed_captures.py

It needs numpy only; its outputs are committed, so the tests never run it.

The echo is a box pulse of PULSE_SAMPLES samples whose delay falls a
fraction `f` between samples; the receiver integrates each sample period
(integrate and dump), so the sampled echo is 1-f, 1, ..., 1, f. The capture
is cut into segments, each holding the target at one fractional delay.

The truth file gives, per millisecond, the angles and range, and two
predicted angle spreads per axis computed here from the rig's own numbers:
- `single`: after pulse compression the echo's energy sits in one sample,
  var(ln A) = (1/E^2 + 2/E) / (4 N), E = the sampled pulse's energy over
  the noise power per sample, N pulses per dwell;
- `gate`: a noncoherent gate of GATE_BINS independent samples summed without
  compression, var(ln A) = (G/E^2 + 2/E) / (4 N).
The angle spread is sqrt(var ln A_plus + var ln A_minus) / |d r / d theta|,
r the log ratio of the two lobes' two-way amplitudes (first-order error
propagation, common practice).
"""

import json
import os
import struct

import numpy as np

HERE = os.path.dirname(os.path.abspath(__file__))
OUT = os.path.join(HERE, "captures")
LIGHT_SPEED = 299_792_458.0

RATE = 160e3                 # complex samples per second
PRI_SAMPLES = 32             # PRF 5 kHz
PULSE_SAMPLES = 4            # box pulse, 25 us
PULSES_PER_DWELL = 8
LOBES = (("right", 1, 0), ("up", 0, 1), ("left", -1, 0), ("down", 0, -1))
SQUINT_DEG = 2.8
BEAMWIDTH_DEG = 7.0          # one-way half-power width the aperture is sized for
PEDESTAL = 0.2               # illumination p + (1-p) cos^2(pi x) over x in [-1/2, 1/2]
ECHO_POWER = 3.0             # per-sample echo power on a lobe's own axis, noise power 1
LEAKAGE_DB = 40.0            # transmit leakage over the noise, over the pulse
TRANSIENT_DB = 14.0          # switch transient, decaying over 3 samples
FIRST_TRANSMIT = 21
ECHO_BIN = 10                # whole-sample part of the echo delay
FRACTIONS = (0.0, 0.2, 0.35, 0.5)
CYCLES_PER_SEGMENT = 300
GATE_BINS = 6                # the noncoherent comparison gate (pulse + 2 bins)
SYNC_LEVELS = (-0.5, -0.17, 0.17, 0.5)
IQ_LSB = 220.0               # int16 counts per unit noise amplitude
SYNC_LSB = 20000.0


# ------------------------------------------------------------------ pattern

def illumination(x):
    return PEDESTAL + (1.0 - PEDESTAL) * np.cos(np.pi * x) ** 2


_X = np.linspace(-0.5, 0.5, 4001)
_ILLUM = illumination(_X)


def aperture_voltage(u):
    """Far-field voltage of the aperture at u = (D/lambda) sin(angle), 1 at u = 0."""
    u = np.atleast_1d(np.asarray(u, dtype=float))
    kernel = np.cos(2.0 * np.pi * np.outer(u, _X)) * _ILLUM
    return np.trapezoid(kernel, _X, axis=1) / np.trapezoid(_ILLUM, _X)


def size_aperture():
    """D/lambda whose one-way half-power full width is BEAMWIDTH_DEG (bisection on u)."""
    lo, hi = 0.0, 1.0
    for _ in range(80):
        mid = 0.5 * (lo + hi)
        if aperture_voltage(mid)[0] ** 2 > 0.5:
            lo = mid
        else:
            hi = mid
    return 0.5 * (lo + hi) / np.sin(np.radians(BEAMWIDTH_DEG / 2.0))


D_OVER_LAMBDA = size_aperture()


def one_way(angle_deg):
    return aperture_voltage(D_OVER_LAMBDA * np.sin(np.radians(angle_deg)))


def lobe_voltage(az, el, lobe):
    """Separable pattern: the lobe's axis sits at (sx, sy) * squint."""
    _, sx, sy = lobe
    return one_way(az - sx * SQUINT_DEG) * one_way(el - sy * SQUINT_DEG)


# ------------------------------------------------------------------- motion

def motion(t):
    az = 0.15 + 0.6 * np.sin(2.0 * np.pi * t / 3.3)
    el = -0.2 + 0.5 * np.cos(2.0 * np.pi * t / 4.7 + 0.4)
    return az, el


# ------------------------------------------------------------------- writer

def write_riff_int16(path, rate, columns):
    frames = np.clip(np.round(np.stack(columns, axis=1)), -32768, 32767).astype("<i2")
    payload = frames.tobytes()
    channels = frames.shape[1]
    header = b"RIFF" + struct.pack("<I", 36 + len(payload)) + b"WAVE"
    header += b"fmt " + struct.pack("<IHHIIHH", 16, 1, channels, int(rate), int(rate) * 2 * channels, 2 * channels, 16)
    header += b"data" + struct.pack("<I", len(payload))
    with open(path, "wb") as f:
        f.write(header + payload)


# -------------------------------------------------------------- the capture

def sampled_box(fraction):
    """Integrate-and-dump samples of a box PULSE_SAMPLES long starting `fraction` into a sample."""
    k = np.arange(PULSE_SAMPLES + 1)
    start, end = fraction, fraction + PULSE_SAMPLES
    return np.clip(np.minimum(k + 1.0, end) - np.maximum(k, start), 0.0, 1.0)


def predicted_sigma(az, el, energy_scale, gate_bins):
    """Angle spread per axis at one instant; energy_scale = the sampled box's energy."""
    def var_ln(e):
        return (gate_bins / e ** 2 + 2.0 / e) / (4.0 * PULSES_PER_DWELL)

    energies = [ECHO_POWER * energy_scale * lobe_voltage(az, el, lobe)[0] ** 4 for lobe in LOBES]
    out = []
    for plus, minus, axis in ((0, 2, 0), (1, 3, 1)):
        h = 1e-3
        def log_ratio(delta):
            a = [az + (delta if axis == 0 else 0.0), el + (delta if axis == 1 else 0.0)]
            return 2.0 * (np.log(lobe_voltage(a[0], a[1], LOBES[plus])[0]) - np.log(lobe_voltage(a[0], a[1], LOBES[minus])[0]))
        slope = (log_ratio(h) - log_ratio(-h)) / (2.0 * h)  # per degree
        out.append(np.sqrt(var_ln(energies[plus]) + var_ln(energies[minus])) / abs(slope))
    return out


def make_capture(name, seed):
    rng = np.random.default_rng(seed)
    cycle = len(LOBES) * PULSES_PER_DWELL * PRI_SAMPLES
    segment = CYCLES_PER_SEGMENT * cycle
    total = FIRST_TRANSMIT + segment * len(FRACTIONS)
    iq = (rng.standard_normal(total) + 1j * rng.standard_normal(total)) * np.sqrt(0.5)
    transmits = np.arange(FIRST_TRANSMIT, total - PRI_SAMPLES + 1, PRI_SAMPLES)
    lobe_of_pulse = (np.arange(len(transmits)) // PULSES_PER_DWELL) % len(LOBES)
    leakage = 10.0 ** (LEAKAGE_DB / 20.0)
    for k, tx in enumerate(transmits):
        iq[tx:tx + PULSE_SAMPLES] += leakage * np.exp(2j * np.pi * rng.random())
        fraction = FRACTIONS[min((tx - FIRST_TRANSMIT) // segment, len(FRACTIONS) - 1)]
        az, el = motion(tx / RATE)
        amplitude = np.sqrt(ECHO_POWER) * lobe_voltage(az, el, LOBES[lobe_of_pulse[k]])[0] ** 2  # two-way
        echo = amplitude * sampled_box(fraction) * np.exp(2j * np.pi * rng.random())
        at = tx + ECHO_BIN
        iq[at:at + len(echo)] += echo
    # The lobe switches on the transmit trigger of each dwell's first pulse.
    switches = transmits[PULSES_PER_DWELL::PULSES_PER_DWELL]
    burst = 10.0 ** (TRANSIENT_DB / 20.0) * np.array([1.0, 0.5, 0.25])
    for s in switches:
        n = min(len(burst), total - s)
        iq[s:s + n] += burst[:n] * (rng.standard_normal(n) + 1j * rng.standard_normal(n)) * np.sqrt(0.5)
    # Sync staircase: level of the active lobe, a two-sample ramp after each switch.
    dwell_index = np.searchsorted(switches, np.arange(total), side="right")
    sync = np.asarray(SYNC_LEVELS)[dwell_index % len(LOBES)]
    for i, s in enumerate(switches):
        a, b = SYNC_LEVELS[i % 4], SYNC_LEVELS[(i + 1) % 4]
        sync[s:s + 2] = a + (b - a) * np.array([1.0, 2.0]) / 3.0
    sync = sync + 0.003 * rng.standard_normal(total)
    write_riff_int16(os.path.join(OUT, name + ".wav"), RATE, [IQ_LSB * iq.real, IQ_LSB * iq.imag, SYNC_LSB * sync])

    bin_m = LIGHT_SPEED / (2.0 * RATE)
    times = np.arange(0.0, total / RATE, 1e-3)
    rows = []
    for t in times:
        seg = min(int((t * RATE - FIRST_TRANSMIT) // segment), len(FRACTIONS) - 1) if t * RATE >= FIRST_TRANSMIT else 0
        fraction = FRACTIONS[seg]
        az, el = motion(t)
        scale = float(np.sum(sampled_box(fraction) ** 2))
        single = predicted_sigma(az, el, scale, 1)
        gate = predicted_sigma(az, el, scale, GATE_BINS)
        rows.append((t, az, el, (ECHO_BIN + fraction) * bin_m, fraction, *single, *gate))
    with open(os.path.join(OUT, name + ".truth.csv"), "w") as f:
        f.write("time_s,az_deg,el_deg,range_m,fraction,sigma_single_az_deg,sigma_single_el_deg,"
                "sigma_gate_az_deg,sigma_gate_el_deg\n")
        for r in rows:
            f.write(",".join(f"{v:.7g}" for v in r) + "\n")
    return dict(samples=int(total), pulses=int(len(transmits)), switches=int(len(switches)),
                segment_s=segment / RATE, first_transmit=FIRST_TRANSMIT)


def write_pattern(path):
    """The rig's one-way pattern as a measured-pattern table (main lobe only)."""
    angles = np.round(np.arange(-9.0, 9.0001, 0.05), 2)
    gain_db = 20.0 * np.log10(np.abs(one_way(angles)))
    with open(path, "w") as f:
        f.write("angle_deg,gain_db\n")
        for a, g in zip(angles, gain_db):
            f.write(f"{a:.2f},{g:.6f}\n")


def main():
    os.makedirs(OUT, exist_ok=True)
    write_pattern(os.path.join(OUT, "compressed-pattern.csv"))
    info = make_capture("compressed-fractions", 211)
    info.update(rate=RATE, pri_samples=PRI_SAMPLES, pulse_samples=PULSE_SAMPLES, pulses_per_dwell=PULSES_PER_DWELL,
                squint_deg=SQUINT_DEG, beamwidth_deg=BEAMWIDTH_DEG, d_over_lambda=float(D_OVER_LAMBDA),
                echo_power=ECHO_POWER, echo_bin=ECHO_BIN, fractions=list(FRACTIONS),
                cycles_per_segment=CYCLES_PER_SEGMENT, gate_bins=GATE_BINS, noise_power_lsb2=IQ_LSB ** 2)
    with open(os.path.join(OUT, "compressed-fractions.json"), "w") as f:
        json.dump(info, f, indent=1)


if __name__ == "__main__":
    main()
