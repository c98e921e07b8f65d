"""``bayesprobe demo``: the main job end to end on the bundled synthetic scenario."""
from __future__ import annotations

import json
import sys
import time
import warnings
from importlib import resources
from pathlib import Path

__all__ = ["run_demo", "demo_files"]


def demo_files() -> tuple[dict, Path]:
    """The scenario description and the folder holding its sweeps."""
    folder = Path(str(resources.files("bayesprobe") / "demo_data"))
    scenario = json.loads((folder / "scenario.json").read_text())
    return scenario, folder


def _limit_threads():
    """Pin BLAS/OpenMP to one thread inside worker processes (two cores would thrash otherwise)."""
    from threadpoolctl import threadpool_limits
    threadpool_limits(1)


def _fit_entry(folder: str, entry: dict, config_dict: dict, out: str, seed: int) -> dict:
    """Fit one demo sweep with automatic model choice, write its results, return table rows."""
    from .errors import ConvergenceWarning
    from .fitting import fit
    from .io import load_sweep
    from .model import ModelConfig
    from .quantities import QUANTITIES, main_names

    folder = Path(folder)
    config = ModelConfig.from_dict(config_dict)
    sweep = load_sweep(folder / entry["file"])
    truth = json.loads((folder / f"{entry['sweep_id']}.truth.json").read_text())["parameters"]
    t = time.perf_counter()
    with warnings.catch_warnings():     # convergence is recorded in the table, not warned twice
        warnings.simplefilter("ignore", ConvergenceWarning)
        result = fit(sweep, config=config, model="auto", seed=seed, progress=False)
    result.save(Path(out) / entry["sweep_id"])
    summary = result.parameter_summary()
    rows = []
    for name in main_names(summary):
        if QUANTITIES[name].table:
            e = summary[name]
            rows.append({"sweep_id": entry["sweep_id"], "model": result.model, "parameter": name,
                         "unit": e["unit"], "median": e["median"], "ci_low": e["ci_low"], "ci_high": e["ci_high"],
                         "truth": truth.get(name), "classical": result.classical.get(name)})
    return {"sweep_id": entry["sweep_id"], "model": result.model, "converged": result.converged,
            "seconds": time.perf_counter() - t, "rows": rows,
            "reasoning": (result.comparison or {}).get("reasoning", "")}


def run_demo(out: Path, *, seed: int = 0, quiet: bool = False, workers: int | None = None) -> int:
    """Fit every demo sweep (in parallel over the machine's cores), print the table, write results."""
    import os
    from concurrent.futures import ProcessPoolExecutor

    from .fitting import make_config
    from .io import atomic_write_text
    from .physics.geometry import Probe
    from .result import _fmt

    scenario, folder = demo_files()
    probe = Probe.from_dict(scenario["probe"])
    config = make_config(probe=probe, ion=scenario["ion"], ion_collection="auto")
    say = (lambda *a: None) if quiet else (lambda *a: print(*a, file=sys.stderr))
    say(f"bayesprobe demo: {scenario['description']}")
    n = len(scenario["sweeps"])
    workers = workers or max(1, min(os.cpu_count() or 1, n))
    say(f"fitting {n} sweeps with both electron models on {workers} worker(s); PSIS-LOO picks one per sweep. "
        "This takes a minute or two.")
    out = Path(out)
    t0 = time.perf_counter()
    done = []
    with ProcessPoolExecutor(max_workers=workers, initializer=_limit_threads) as pool:
        futures = [pool.submit(_fit_entry, str(folder), entry, config.to_dict(), str(out), seed)
                   for entry in scenario["sweeps"]]
        for fut in futures:
            r = fut.result()
            done.append(r)
            say(f"  {r['sweep_id']}: selected {r['model']} in {r['seconds']:.0f} s "
                f"({'converged' if r['converged'] else 'NOT converged'})")
    rows = [row for r in done for row in r["rows"]]
    header = (f"{'sweep':<8}{'parameter':<13}{'unit':<6}{'median':>11}{'90% interval':>25}"
              f"{'truth':>11}{'classical':>11}")
    lines = [header, "-" * len(header)]
    for r in rows:
        interval = f"[{_fmt(r['ci_low'])}, {_fmt(r['ci_high'])}]"
        lines.append(f"{r['sweep_id']:<8}{r['parameter']:<13}{r['unit']:<6}{_fmt(r['median']):>11}"
                     f"{interval:>25}{_fmt(r['truth']):>11}{_fmt(r['classical']):>11}")
    table = "\n".join(lines)
    out.mkdir(parents=True, exist_ok=True)
    keys = ("sweep_id", "model", "parameter", "unit", "median", "ci_low", "ci_high", "truth", "classical")
    csv = [",".join(k if k in ("sweep_id", "model", "parameter", "unit") else f"{k}" for k in keys)]
    for r in rows:
        csv.append(",".join("" if r[k] is None else str(r[k]) for k in keys))
    atomic_write_text(out / "demo_table.csv", "\n".join(csv) + "\n")
    atomic_write_text(out / "demo_table.txt", table + "\n")
    print(table)
    for r in done:
        if r["reasoning"]:
            say(f"{r['sweep_id']}: {r['reasoning']}")
    say("\nSYNTHETIC data: the truth column is known because the demo sweeps were simulated. "
        "'classical' is the automated windowed textbook analysis of the same sweep.")
    from .report import build_report
    report = build_report(out)
    say(f"results (summary.json, parameters.csv, posterior.nc, figures) for each sweep are in {out}/ "
        f"- total {time.perf_counter() - t0:.0f} s")
    say(f"report: {report} (one self-contained HTML page; open it in a browser)")
    return 0 if all(r["converged"] for r in done) else 3
