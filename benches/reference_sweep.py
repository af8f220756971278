#!/usr/bin/env python3
"""Independent reference for benches/sweep-4096.yaml: a straightforward vectorised script.

The ideal emitter-degenerated bipolar pair (no base current, no Early effect, ideal tail) has
the exact transfer, in terms of y = ln(I_P / I_M) (textbook large-signal pair analysis,
common practice):

    v_d = phi_T * y + R_E * I_tail * tanh(y / 2),      I_P - I_M = I_tail * tanh(y / 2)

For every amplitude A (4,096 of them, 1 mV to 1 V, log-spaced) the script samples one period
of v_d = A cos(theta) at 4,096 phases, solves every sample by Newton's method on the exact
transfer (all samples and amplitudes at once, vectorised), takes the differential output
R_L * (I_P - I_M), and measures HD3 and THD (harmonics 2..40) with a general complex FFT.

Usage:
    python3 reference_sweep.py                     # writes out/reference-sweep.csv (amplitude, hd3, thd)
    python3 reference_sweep.py --compare report.json   # also prints the largest differences
"""
import argparse
import json
import sys

import numpy as np

BOLTZMANN = 1.380649e-23          # J/K, CODATA 2018 (exact)
ELEMENTARY_CHARGE = 1.602176634e-19  # C, CODATA 2018 (exact)


def sweep(tail_current, load_resistance, emitter_resistance, temperature_c,
          amplitudes, samples=4096, highest=40, chunk=256):
    phi = BOLTZMANN * (temperature_c + 273.15) / ELEMENTARY_CHARGE
    r_i = emitter_resistance * tail_current
    theta = 2.0 * np.pi * np.arange(samples) / samples
    hd3 = np.empty(len(amplitudes))
    thd = np.empty(len(amplitudes))
    for start in range(0, len(amplitudes), chunk):
        a = amplitudes[start:start + chunk, None]
        v = a * np.cos(theta)[None, :]
        # Start left of the root (f is concave for y > 0), so Newton converges monotonically.
        y = v / (phi + 0.5 * r_i)
        for _ in range(100):
            t = np.tanh(0.5 * y)
            f = phi * y + r_i * t - v
            slope = phi + 0.5 * r_i * (1.0 - t * t)
            step = f / slope
            y -= step
            if np.max(np.abs(step)) <= 1e-15 * max(1.0, np.max(np.abs(y))):
                break
        else:
            sys.exit("Newton did not converge")
        out = load_resistance * tail_current * np.tanh(0.5 * y)
        spectrum = np.abs(np.fft.fft(out, axis=1))[:, :highest + 1]
        fundamental = spectrum[:, 1]
        hd3[start:start + chunk] = 20.0 * np.log10(spectrum[:, 3] / fundamental)
        power = np.sum(spectrum[:, 2:highest + 1] ** 2, axis=1)
        thd[start:start + chunk] = 10.0 * np.log10(power / fundamental ** 2)
    return hd3, thd


def main():
    parser = argparse.ArgumentParser()
    parser.add_argument("--emitter-resistance", type=float, default=200.0)
    parser.add_argument("--compare", help="a linbudget report.json of the same sweep")
    parser.add_argument("--output", default="out/reference-sweep.csv")
    args = parser.parse_args()
    amplitudes = 1e-3 * (1e3) ** (np.arange(4096) / 4095.0)
    hd3, thd = sweep(1e-3, 2e3, args.emitter_resistance, 27.0, amplitudes)
    np.savetxt(args.output, np.column_stack([amplitudes, hd3, thd]), delimiter=",",
               header="amplitude_v,hd3_dbc,thd_dbc", comments="")
    if args.compare:
        with open(args.compare) as f:
            points = json.load(f)["points"]
        if len(points) != len(amplitudes):
            sys.exit("the report is not the same sweep")
        worst_hd3 = worst_thd = 0.0
        for a, h, t, p in zip(amplitudes, hd3, thd, points):
            if abs(p["amplitude_v"] - a) > 1e-12 * a:
                sys.exit(f"amplitude {a} V is not in the report")
            if p["hd3_dbc"] is not None:
                worst_hd3 = max(worst_hd3, abs(p["hd3_dbc"] - h))
            if p["thd_dbc"] is not None:
                worst_thd = max(worst_thd, abs(p["thd_dbc"] - t))
        print(f"largest |difference|: HD3 {worst_hd3:.2e} dB, THD {worst_thd:.2e} dB")


if __name__ == "__main__":
    main()
