#!/usr/bin/env python3
"""A pulsed capture whose pulse train and sync staircase hold surprises after
a long regular stretch, for the tests of the pulsed front end's locked mode.

Written from the description of the signal alone (numpy only, sharing no
code with lobeflow). Run it from the repository root:

    python3 tests/independent/make_front_end_surprises.py

The capture: 1 MS/s, nominal PRF 4 kHz (250 samples), four lobes switched
every 4 pulse slots, complex noise of power 2, a 3-sample transmit leakage
of amplitude 300 (about 46 dB over the noise) at each transmit instant and
a weak echo 60 samples later. Channels I, Q and the sync staircase, as a
float32 WAV (format tag 3, written byte by byte here). After 100 regular
pulses:

- pulse slot 100 is not transmitted (a missing pulse);
- pulse slot 181 comes 190 samples after the one before (an early pulse,
  0.76 of the interval; the train goes on from it);
- the switch due at slot 228 comes 2 slots early, at slot 226 (a switch
  off schedule; the schedule goes on from it: a dwell of 2 pulses);
- from slot 300 on the interval is 200 samples (the PRF changes to 5 kHz).

The sync switches 25 samples before the first transmit instant of each
dwell and settles like an RC line (time constant 3 samples).

front-end-surprises.truth.txt lists, one per line:
- `tx N sent|missing` every pulse slot's transmit instant;
- `switch N LOBE` where the sync first passes the midpoint between the old
  and the new level (found here on the written float32 values);
- `level V` the four sync levels, lowest (first lobe) first.
"""

import os
import struct

import numpy as np

OUT = os.path.join(os.path.dirname(os.path.abspath(__file__)), "captures")
RATE = 1_000_000
PRI, PRI_AFTER = 250, 200
SLOTS_PER_DWELL = 4
LEVELS = [0.5, 1.3, 2.1, 2.9]
FIRST_TX = 137
MISSING_SLOT, EARLY_SLOT, EARLY_GAP = 100, 181, 190
OFF_SCHEDULE_SLOT, OFF_SCHEDULE_EARLY = 228, 2
PRF_CHANGE_SLOT = 300
LEAD = 25
TOTAL = 150_000


def slot_instants():
    t, at, k = [], FIRST_TX, 0
    while at < TOTAL - PRI:
        t.append(at)
        k += 1
        gap = PRI_AFTER if k >= PRF_CHANGE_SLOT else PRI
        at += EARLY_GAP if k == EARLY_SLOT else gap
    return np.array(t)


def dwell_first_slots(n_slots):
    """Slots that open a dwell: every 4, the one at 228 moved 2 early and the
    schedule counted on from there."""
    firsts, k = [], 0
    while k < n_slots:
        firsts.append(k)
        nxt = k + SLOTS_PER_DWELL
        if nxt == OFF_SCHEDULE_SLOT:
            nxt -= OFF_SCHEDULE_EARLY
        k = nxt
    return firsts


def write_wav_float32(path, channels):
    data = np.stack(channels, axis=1).astype("<f4")
    n_ch = data.shape[1]
    body = data.tobytes()
    fmt = struct.pack("<HHIIHH", 3, n_ch, RATE, RATE * 4 * n_ch, 4 * n_ch, 32)
    with open(path, "wb") as f:
        f.write(b"RIFF" + struct.pack("<I", 4 + 8 + len(fmt) + 8 + len(body)) + b"WAVE")
        f.write(b"fmt " + struct.pack("<I", len(fmt)) + fmt)
        f.write(b"data" + struct.pack("<I", len(body)) + body)


def main():
    rng = np.random.default_rng(2026)
    n = np.arange(TOTAL)
    iq = rng.standard_normal(TOTAL) + 1j * rng.standard_normal(TOTAL)  # power 2
    tx = slot_instants()
    sent = np.ones(len(tx), dtype=bool)
    sent[MISSING_SLOT] = False
    for k in np.flatnonzero(sent):
        phase = np.exp(1j * rng.uniform(0, 2 * np.pi))
        iq[tx[k]:tx[k] + 3] += 300.0 * phase
        iq[tx[k] + 60:tx[k] + 63] += 4.0 * np.exp(1j * rng.uniform(0, 2 * np.pi))

    firsts = dwell_first_slots(len(tx))
    switch_at = [tx[k] - LEAD for k in firsts[1:]]
    lobe_after = [d % len(LEVELS) for d in range(1, len(firsts))]
    # The staircase: each step settles exponentially from its switch instant.
    sync = np.full(TOTAL, LEVELS[0])
    for at, lobe in zip(switch_at, lobe_after):
        old = sync[at - 1]
        settle = 1.0 - np.exp(-(n[at:] - at + 1) / 3.0)
        sync[at:] = old + (LEVELS[lobe] - old) * settle
    sync += 0.01 * rng.standard_normal(TOTAL)
    sync32 = sync.astype(np.float32)

    os.makedirs(OUT, exist_ok=True)
    write_wav_float32(os.path.join(OUT, "front-end-surprises.wav"), [iq.real, iq.imag, sync32])

    with open(os.path.join(OUT, "front-end-surprises.truth.txt"), "w") as f:
        f.write("# written by tests/independent/make_front_end_surprises.py\n")
        for v in LEVELS:
            f.write(f"level {v}\n")
        for k, at in enumerate(tx):
            f.write(f"tx {at} {'sent' if sent[k] else 'missing'}\n")
        old = 0
        for at, lobe in zip(switch_at, lobe_after):
            mid = 0.5 * (LEVELS[old] + LEVELS[lobe])
            values = sync32[at - 5:].astype(np.float64)
            past = values > mid if LEVELS[lobe] > LEVELS[old] else values < mid
            f.write(f"switch {at - 5 + int(np.argmax(past))} {lobe}\n")
            old = lobe


if __name__ == "__main__":
    main()
