"""Regenerate the bundled demo scenario (synthetic data, invented for bayesprobe).

Scenario: a radial scan across an argon inductively coupled reactor, seen by a
cylindrical tungsten wire probe (radius 50 um, exposed length 5 mm). Three
positions: the centre (dense, single temperature), mid-radius, and near the coil
where a hot electron tail is present. All numbers are invented; the sweeps are
drawn from the bayesprobe forward model with the noise model of
``bayesprobe.simulate`` and the truth is written beside each file.

Run from the repository root:  python demo/make_demo_data.py
"""
import json
from pathlib import Path

from bayesprobe import ModelConfig, Probe, simulate
from bayesprobe.io import write_sweep_csv

OUT = Path(__file__).resolve().parents[1] / "bayesprobe" / "demo_data"
PROBE = Probe("cylindrical", radius=50e-6, length=5e-3)

SCENARIO = [
    # id, electrons, truth, seed
    ("r000mm", "maxwellian", {"n_e": 4e16, "T_e": 2.6, "V_p": 14.0}, 11),
    ("r040mm", "maxwellian", {"n_e": 2e16, "T_e": 3.0, "V_p": 13.0}, 12),
    ("r080mm", "bi-maxwellian", {"n_e": 8e15, "T_e_cold": 2.5, "T_e_hot": 12.0, "hot_fraction": 0.08,
                                 "V_p": 12.0}, 13),
]


def main():
    OUT.mkdir(parents=True, exist_ok=True)
    index = []
    for sweep_id, electrons, truth, seed in SCENARIO:
        config = ModelConfig(probe=PROBE, ion="Ar", ion_collection="auto", electrons=electrons)
        sim = simulate(truth, config=config, v_min=-40.0, v_max=24.0, n_points=500, noise_rel=0.005,
                       seed=seed, sweep_id=sweep_id)
        write_sweep_csv(OUT / f"{sweep_id}.csv", sim.sweep,
                        header_comment="SYNTHETIC demo sweep (invented argon ICP radial scan); "
                                       f"truth in {sweep_id}.truth.json")
        (OUT / f"{sweep_id}.truth.json").write_text(json.dumps(sim.truth_record(), indent=2) + "\n")
        index.append({"sweep_id": sweep_id, "file": f"{sweep_id}.csv", "radius_mm": float(sweep_id[1:4]),
                      "electrons": electrons})
    (OUT / "scenario.json").write_text(json.dumps(
        {"description": "SYNTHETIC radial scan across an argon inductively coupled reactor; "
                        "cylindrical W wire probe r = 50 um, L = 5 mm; invented for the bayesprobe demo",
         "probe": PROBE.to_dict(), "ion": "Ar", "sweeps": index}, indent=2) + "\n")
    print(f"wrote {len(index)} sweeps to {OUT}")


if __name__ == "__main__":
    main()
