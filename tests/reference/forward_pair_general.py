#!/usr/bin/env python3
"""Independent 50-digit reference for the forward-active pair with the Early effect and a
finite tail resistance (the general static solve of linbudget).

Written from the model as specs/README.md states it (no linbudget code is used or imitated).
Per side, with J = I_S exp(V_BE/phi) the transport current and phi = kT/q:
    I_B = J/beta,  I_C = J (1 + V_CE/V_A),  I_E = I_C + I_B,
    V_CE = (V_CC - R_L I_C) - (V_tail + R_E I_E)      (intrinsic collector to intrinsic emitter)
    V_in = V_CM +/- v_d/2 = R_B I_B + V_BE + R_E I_E + V_tail
and the tail node: I_E,P + I_E,M = I_tail + V_tail/R_tail.
The three unknowns (V_tail, V_BE,P, V_BE,M) are found by mpmath.findroot (multidimensional
Newton) at 50 significant digits, continued from the balanced pair in 20 input steps; I_C of each side follows from
its linear equation above.

Usage:
    python3 forward_pair_general.py table      # the operating points the Rust test embeds
    python3 forward_pair_general.py tone A N   # differential and P-collector HD2, HD3 (dBc)
                                               # of A*cos(theta) from N exact samples
Needs mpmath (and numpy for `tone`).
"""
import sys

import mpmath as mp

mp.mp.dps = 50

BOLTZMANN = mp.mpf("1.380649e-23")      # J/K, CODATA 2018 (exact)
CHARGE = mp.mpf("1.602176634e-19")      # C, CODATA 2018 (exact)


def stage(mismatch=0.0):
    """The test stage: 1 mA tail with 50 kOhm, R_L 2 kOhm, R_E 200 Ohm, R_B 120 Ohm,
    beta 110, V_A 70 V, supply 5 V, input common mode 1.5 V, I_S 1e-16 A (P side times
    1 + mismatch), 27 degC."""
    return {
        "phi": BOLTZMANN * (mp.mpf(27) + mp.mpf("273.15")) / CHARGE,
        "is": [mp.mpf("1e-16") * (1 + mp.mpf(mismatch)), mp.mpf("1e-16")],
        "beta": mp.mpf(110), "va": mp.mpf(70), "rl": mp.mpf(2000), "re": mp.mpf(200),
        "rb": mp.mpf(120), "tail": mp.mpf("1e-3"), "rtail": mp.mpf(50000),
        "vcc": mp.mpf(5), "vcm": mp.mpf("1.5"),
    }


def side(s, k, vbe, vt):
    j = s["is"][k] * mp.exp(vbe / s["phi"])
    ib = j / s["beta"]
    # I_C (1 + J (R_L + R_E)/V_A) = J (1 + (V_CC - V_tail - R_E I_B)/V_A)
    ic = j * (1 + (s["vcc"] - vt - s["re"] * ib) / s["va"]) / (1 + j * (s["rl"] + s["re"]) / s["va"])
    return ic, ib, ic + ib


def solve(s, vd, guess=None):
    vin = [s["vcm"] + mp.mpf(vd) / 2, s["vcm"] - mp.mpf(vd) / 2]

    def equations(vt, vbe_p, vbe_m):
        out = []
        emitters = mp.mpf(0)
        for k, vbe in enumerate([vbe_p, vbe_m]):
            ic, ib, ie = side(s, k, vbe, vt)
            out.append(s["rb"] * ib + vbe + s["re"] * ie + vt - vin[k])
            emitters += ie
        out.append(emitters - s["tail"] - vt / s["rtail"])
        return out

    if guess is None:
        # Continuation from the balanced pair: V_BE = phi ln(I_tail/2/I_S), V_tail from the loop.
        vbe = s["phi"] * mp.log(s["tail"] / 2 / s["is"][1])
        guess = [s["vcm"] - vbe - s["re"] * s["tail"] / 2, vbe, vbe]
        for step in range(1, 21):
            guess = solve(s, mp.mpf(vd) * step / 20, guess)[3]
    root = mp.findroot(equations, guess, tol=mp.mpf(10) ** -60, maxsteps=200)
    vt, vbe_p, vbe_m = root[0], root[1], root[2]
    icp = side(s, 0, vbe_p, vt)[0]
    icm = side(s, 1, vbe_m, vt)[0]
    return vt, icp, icm, [vt, vbe_p, vbe_m]


def table():
    for mismatch in ["0", "0.01"]:
        s = stage(mismatch)
        for vd in ["0", "0.001", "-0.05", "0.3", "-0.9"]:
            vt, icp, icm, _ = solve(s, mp.mpf(vd))
            out = s["rl"] * (icp - icm)
            print(f"({mismatch}, {vd}, {mp.nstr(vt, 20)}, {mp.nstr(icp, 20)}, "
                  f"{mp.nstr(icm, 20)}, {mp.nstr(out, 20)}),")


def tone(amplitude, n):
    import numpy as np
    s = stage()
    diff, single = [], []
    guess = None
    for i in range(n):
        vd = mp.mpf(amplitude) * mp.cos(2 * mp.pi * i / n)
        vt, icp, icm, guess = solve(s, vd, guess)
        diff.append(float(s["rl"] * (icp - icm)))
        single.append(float(s["vcc"] - s["rl"] * icp))
    for name, x in [("differential", diff), ("P collector", single)]:
        spectrum = np.abs(np.fft.rfft(np.array(x)))
        hd = [20 * np.log10(spectrum[h] / spectrum[1]) for h in (2, 3)]
        print(f"{name}: HD2 {hd[0]!r} dBc, HD3 {hd[1]!r} dBc")


if __name__ == "__main__":
    if sys.argv[1:2] == ["table"]:
        table()
    elif sys.argv[1:2] == ["tone"]:
        tone(sys.argv[2], int(sys.argv[3]))
    else:
        print(__doc__)
