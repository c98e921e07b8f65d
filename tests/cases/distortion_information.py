"""How much T_e information a circuit distortion takes from a clean sweep: the Cramer-Rao analysis.

For the clean sweeps of tests/cases/distortions.py (Gaussian noise with the simulator's known sd)
the Fisher information of the mean current is F = J^T diag(1/sd^2) J, J the derivatives of the
model current with respect to (ln n_e[, ln n_i], ln T_e, V_p) and the distortion parameters at
their undistorted values (R = 0 from above, G = I_0 = 0). The Cramer-Rao sd of ln T_e is
sqrt((F^-1)_TT) (Rao 1945; Cramer 1946; e.g. Kay, *Fundamentals of Statistical Signal
Processing: Estimation Theory*, ch. 3), with and without the distortion block. The noise
parameters are left out (they barely couple to the mean parameters; checked against the sampled
ratios, which agree within a few per cent).

Reported per sweep: the sd ratio aware/plain with the distortion free (a flat prior, R allowed
both signs: for R >= 0 it is an upper bound); the correlation of ln T_e with each distortion
parameter; the T_e sd when one region of the sweep (ion branch V < V_f, transition V_f..V_p,
electron saturation V > V_p) is dropped from the plain fit, relative to all points; and the prior
sd of the distortion parameters (normal, in units of T_e/I_es for R, I_is/span for G and I_is for
I_0) at which the ratio falls to 1.25.

Run ``python tests/cases/distortion_information.py`` for the table over sweeps 200-209.
"""
from __future__ import annotations

import sys
from pathlib import Path

import numpy as np

import bayesprobe as bp
from bayesprobe.physics.electrons import electron_saturation_current

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))   # run as a script: tests/ importable
from cases.distortions import SWITCH, make_case  # noqa: E402

DISTORTION_PARAMS = {"resistance": ("R_series",), "leakage": ("G_leak", "I_offset")}


def _jacobian(V, base, cfg, plasma, distortion, scale):
    def current(p):
        return bp.probe_current(V, p, cfg, validate=False)
    cols = []
    for n in plasma:
        p1, p2 = dict(base), dict(base)
        if n == "V_p":
            h = 1e-4
            p1[n] += h
            p2[n] -= h
        else:                                   # logarithmic parameters
            h = 1e-5
            p1[n] *= np.exp(h)
            p2[n] *= np.exp(-h)
        cols.append((current(p1) - current(p2)) / (2 * h))
    for n in distortion:
        h = 1e-6 * scale[n]
        p1 = dict(base, **{n: h})
        if n == "R_series":                     # R >= 0: one-sided difference at 0+
            p0 = dict(base, **{n: 1e-9 * scale[n]})
            cols.append((current(p1) - current(p0)) / (h - 1e-9 * scale[n]) * scale[n])
        else:
            p2 = dict(base, **{n: -h})
            cols.append((current(p1) - current(p2)) / (2 * h) * scale[n])
    return np.array(cols).T


def cramer_rao(kind: str, i: int, *, prior_sd: float | None = None) -> dict:
    """Cramer-Rao analysis of clean sweep ``i`` of ``kind`` ("resistance" or "leakage")."""
    cfg, sim = make_case(kind, i, clean=True)
    truth = {k: sim.truth[k] for k in ("n_e", "T_e", "V_p")}
    V = sim.sweep.voltage
    mu = bp.probe_current(V, truth, cfg)
    sd = np.sqrt(sim.noise["noise_floor_A"] ** 2 + (sim.noise["noise_rel"] * mu) ** 2)
    I_es = electron_saturation_current(truth["n_e"], truth["T_e"], cfg.probe.area)
    I_is = -float(mu[0])
    span = float(V[-1] - V[0])
    plasma = ["n_e", "T_e", "V_p"] if cfg.quasi_neutral else ["n_e", "n_i", "T_e", "V_p"]
    base = dict(truth, n_i=truth["n_e"])
    dist = DISTORTION_PARAMS[kind]
    base.update({n: 0.0 for n in dist})
    scale = {"R_series": truth["T_e"] / I_es, "G_leak": I_is / span, "I_offset": I_is}
    J = _jacobian(V, base, cfg.with_(**{SWITCH[kind]: True}), plasma, dist, scale) / sd[:, None]
    F = J.T @ J
    p, k = len(plasma), plasma.index("T_e")
    sd_plain = float(np.sqrt(np.linalg.inv(F[:p, :p])[k, k]))

    def ratio(s):
        Fp = F.copy()
        if s is not None:
            Fp[p:, p:] += np.eye(len(dist)) / s ** 2
        return float(np.sqrt(np.linalg.inv(Fp)[k, k]) / sd_plain)

    C = np.linalg.inv(F)
    corr = C[k, p:] / np.sqrt(C[k, k] * np.diag(C)[p:])
    regions = {"ion": V < sim.truth["V_f"], "transition": (V >= sim.truth["V_f"]) & (V < truth["V_p"]),
               "saturation": V >= truth["V_p"]}
    drop = {}
    for name, m in regions.items():
        Fm = J[~m][:, :p].T @ J[~m][:, :p]
        drop[name] = float(np.sqrt(np.linalg.inv(Fm)[k, k]) / sd_plain)
    grid = np.logspace(-4, 2, 601)
    over = [s for s in grid if ratio(s) > 1.25]
    return {"sd_lnT_plain": sd_plain, "ratio_free": ratio(None), "ratio_prior": ratio(prior_sd),
            "corr": dict(zip(dist, np.round(corr, 3).tolist())), "sd_ratio_without": drop,
            "prior_sd_for_1.25": over[0] if over else np.inf, "T_e_over_I_es_ohm": truth["T_e"] / I_es,
            "I_es_over_I_is": I_es / I_is}


if __name__ == "__main__":
    for kind in ("resistance", "leakage"):
        for i in range(200, 210):
            r = cramer_rao(kind, i)
            print(kind, i, f"ratio {r['ratio_free']:.3f}", "corr", r["corr"],
                  "without", {k: round(v, 2) for k, v in r["sd_ratio_without"].items()},
                  f"prior sd for 1.25: {r['prior_sd_for_1.25']:.3g}",
                  f"T_e/I_es {r['T_e_over_I_es_ohm']:.3g} ohm, I_es/I_is {r['I_es_over_I_is']:.0f}")
