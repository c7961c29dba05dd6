#!/usr/bin/env python3
"""Difference-over-sum discriminator as an external lobeflow block.

Pairs each dwell with the waiting dwell of its opposite lobe and turns the
amplitudes A (lobe at +squint) and B into an angle: d = (A-B)/(A+B) is the
error signal, r = 2 atanh(d) = ln(A/B) its log ratio, and for a Gaussian
lobe pattern g(x) = exp(-2 ln2 x^2 / BW^2) seen n ways the log ratio is
linear in the angle, r = 8 n ln2 squint theta / BW^2. The same formulas as
the built-in ratio_discriminator with signal diff_sum and beam gaussian.
"""
import math
import os
import sys

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), ".."))
import lobeflow_block  # noqa: E402

DESCRIPTION = {
    "name": "dos_discriminator",
    "doc": "difference-over-sum angle errors from opposite-lobe dwells (Gaussian beam)",
    "inputs": [{"name": "dwells", "kind": "dwell", "doc": "integrated lobe dwells"}],
    "outputs": [{"name": "estimates", "kind": "estimate", "doc": "one estimate per pair of dwells"}],
    "params": [
        {"name": "pairs", "type": "text", "default": "az=right/left, el=up/down", "doc": "axis=plus/minus lobes"},
        {"name": "beamwidth", "type": "number", "unit": "deg", "default": "6 deg", "min": 0.01, "max": 179,
         "doc": "one-way 3 dB beamwidth of one lobe"},
        {"name": "squint", "type": "number", "unit": "deg", "default": "2.4 deg", "min": 0.001, "max": 89,
         "doc": "angle of each lobe's axis from boresight"},
        {"name": "way", "type": "choice", "choices": ["one", "two"], "default": "two", "doc": "pattern seen n ways"},
        {"name": "floor", "type": "number", "unit": "dB", "default": "-20 dB", "min": -120, "max": -1,
         "doc": "usable region ends where the far lobe's one-way gain falls to this"},
        {"name": "edge_sigmas", "type": "number", "default": 2, "min": 0, "max": 10,
         "doc": "flag out of range within this many sigmas of the region's edge"},
        {"name": "min_snr", "type": "number", "unit": "dB", "default": "0 dB", "min": -100, "max": 100,
         "doc": "weaker dwell's SNR below which a pair gives no number"},
    ],
}

LN2 = math.log(2.0)


def db(x, k):
    return k * math.log10(x) if x > 0 else (-math.inf if x == 0 else math.nan)


def region_edge(bw, sq, n, floor_db):
    """Largest |ln(A/B)| trusted, walked out from boresight in steps of
    bw/2000 like the built-in model: to 90 deg less the squint, then back
    to where the far lobe's one-way gain reaches floor_db."""
    step = max(bw / 2000.0, 1e-5)
    ln_v = lambda x: -2.0 * LN2 * x * x / (bw * bw)  # noqa: E731
    log_ratio = lambda t: n * (ln_v(t - sq) - ln_v(t + sq))  # noqa: E731
    limit = 0.0
    while limit + step <= 90.0 - sq:
        limit += step
    t = 0.0
    while t + step <= limit and 20.0 * math.log10(max(abs(math.exp(ln_v(t + step + sq))), 1e-300)) >= floor_db:
        t += step
    return log_ratio(t if 0.0 < t < limit else limit)


def main():
    block = lobeflow_block.Block(DESCRIPTION)
    p = block.params
    bw, sq, n = p["beamwidth"], p["squint"], 2 if p["way"] == "two" else 1
    slope = 8.0 * n * LN2 * sq / (bw * bw)
    r_limit = region_edge(bw, sq, n, p["floor"])
    pairs = {}
    for entry in p["pairs"].split(","):
        axis, lobes = (s.strip() for s in entry.split("="))
        plus, minus = (s.strip() for s in lobes.lstrip("-").split("/"))
        pairs[axis] = (minus, plus) if lobes.startswith("-") else (plus, minus)
    waiting = {}
    for d in block.items():
        name = d["tag"]["name"]
        axis = next((a for a, pm in pairs.items() if name in pm), None)
        if axis is None:
            continue
        is_plus = pairs[axis][0] == name
        w = waiting.pop(axis, None)
        if w is None or w[1] == is_plus:
            waiting[axis] = (d, is_plus)
            continue
        plus, minus = (d, w[0]) if is_plus else (w[0], d)
        va, vb = plus["var_ln_amp"], minus["var_ln_amp"]
        a = plus["amplitude"] * (math.exp(va) if math.isfinite(va) else 1.0)
        b = minus["amplitude"] * (math.exp(vb) if math.isfinite(vb) else 1.0)
        error, sigma, ratio_db, flag = None, math.nan, math.nan, "no_signal"
        if all(math.isfinite(x) and x > 0 for x in (a, b)):
            ratio_db, flag = db(a / b, 20.0), "out_of_range"
            d_over_s = (a - b) / (a + b)
            r = 2.0 * math.atanh(d_over_s) if abs(d_over_s) < 1.0 else math.nan
            spread = math.sqrt(va + vb) if va + vb >= 0 else math.nan
            near_edge = p["edge_sigmas"] > 0 and abs(math.log(a / b)) + p["edge_sigmas"] * spread > r_limit
            if math.isfinite(r) and abs(r) <= r_limit and not near_edge:
                error, sigma, flag = r / slope, spread / slope, "ok"
        snrs = [s for s in (plus["snr"], minus["snr"]) if not math.isnan(s)]
        snr_db = db(min(snrs), 10.0) if snrs else math.nan
        if flag == "ok" and not snr_db >= p["min_snr"]:
            error, sigma, flag = None, math.nan, "no_signal"
        ia, ib = plus["index"], minus["index"]
        ranges = (plus["range_m"], minus["range_m"])
        block.emit({
            "kind": "estimate", "index": ia // 2 + ib // 2 + (ia % 2 + ib % 2) // 2, "rate": plus["rate"],
            "axis": axis, "error_deg": error, "sigma_deg": sigma, "snr_db": snr_db, "ratio_db": ratio_db,
            "range_m": None if None in ranges else 0.5 * (ranges[0] + ranges[1]), "flag": flag,
        })


if __name__ == "__main__":
    main()
