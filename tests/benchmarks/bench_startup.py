"""Benchmark: start-up and a whole ``bandsolve build --method pls`` as a user runs them.

Run on demand (not collected by pytest)::

    /work/main/.venv/bin/python tests/benchmarks/bench_startup.py [--repeats 5] [--n 2000]
        [--p 300] [--no-bytecode-cache]

Writes invented calibration data with a fixed random stream (n simulated spectra × p points,
4 overlapping bands, 4 analytes; concentrations to 4 decimals, spectra to 5), then runs, each
in its own child process and alternately, best of ``--repeats``:

* ``bandsolve --version`` (target ≤ 0.3 s);
* ``bandsolve build --method pls`` on the files (default options: components chosen by
  10-fold cross-validation and the randomization rule; target ≤ 1.0 s for the whole process);
* the imports alone: ``import numpy`` (the floor of any numerical Python tool), ``import
  numpy, pandas, scipy.special`` (the libraries a build needs: the floor of the build),
  ``import sklearn.base`` (what the estimators' base class cost before the build stopped
  importing scikit-learn) and ``import bandsolve.calibration.build_pls``.

It prints wall time and CPU time (user + system, from ``wait4``) of each. The machine may be
shared: CPU time is the steadier measure, though BLAS threads starting up add CPU time that
is not wall time.

The children get a bytecode cache in a temporary folder (``PYTHONPYCACHEPREFIX``, filled by
one unmeasured run of each command), as an installed package has its compiled modules;
``--no-bytecode-cache`` runs them with the environment as it is (with
``PYTHONDONTWRITEBYTECODE=1`` every run compiles bandsolve's modules, about 0.1 s).
"""

from __future__ import annotations

import argparse
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np


def write_data(folder: Path, n: int, p: int) -> tuple[Path, Path]:
    """Invented calibration spectra and concentrations (simulated, not measured)."""
    rng = np.random.default_rng(12345)
    axis = np.linspace(400.0, 700.0, p)
    pure = np.vstack([np.exp(-0.5 * ((axis - c) / 40.0) ** 2) for c in (450, 500, 560, 620)])
    conc = rng.uniform(0.1, 1.0, (n, 4))
    spectra = conc @ pure + 0.002 * rng.standard_normal((n, p))
    spectra_csv, conc_csv = folder / "spectra.csv", folder / "conc.csv"
    with open(spectra_csv, "w") as handle:
        handle.write("sample," + ",".join(f"{a:.4f}" for a in axis) + "\n")
        handle.writelines(f"s{i}," + ",".join(f"{v:.5f}" for v in row) + "\n"
                          for i, row in enumerate(spectra))
    with open(conc_csv, "w") as handle:
        handle.write("sample," + ",".join(f"dye {k} [mg/L]" for k in "ABCD") + "\n")
        handle.writelines(f"s{i}," + ",".join(f"{v:.4f}" for v in row) + "\n"
                          for i, row in enumerate(conc))
    return spectra_csv, conc_csv


def run(cmd: list[str], env: dict[str, str]) -> tuple[float, float]:
    """Wall time and CPU time (user + system, s) of one child process."""
    start = time.perf_counter()
    proc = subprocess.Popen(cmd, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, env=env)
    _, status, usage = os.wait4(proc.pid, 0)
    elapsed = time.perf_counter() - start
    if os.waitstatus_to_exitcode(status) != 0:
        err = proc.stderr.read().decode() if proc.stderr else ""
        raise SystemExit(f"{' '.join(cmd)} failed: {err}")
    return elapsed, usage.ru_utime + usage.ru_stime


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeats", type=int, default=5)
    parser.add_argument("--n", type=int, default=2000)
    parser.add_argument("--p", type=int, default=300)
    parser.add_argument("--no-bytecode-cache", action="store_true",
                        help="run the children with the environment as it is")
    args = parser.parse_args()
    py = sys.executable
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        spectra, conc = write_data(folder, args.n, args.p)
        model = folder / "model.bsm"
        env = dict(os.environ)
        if not args.no_bytecode_cache:
            env.pop("PYTHONDONTWRITEBYTECODE", None)
            env["PYTHONPYCACHEPREFIX"] = str(folder / "pycache")
        cmds = {
            "import numpy": [py, "-c", "import numpy"],
            "numpy+pandas+special": [py, "-c", "import numpy, pandas, scipy.special"],
            "import sklearn.base": [py, "-c", "import sklearn.base"],
            "import build_pls": [py, "-c", "import bandsolve.calibration.build_pls"],
            "bandsolve --version": [py, "-m", "bandsolve.cli", "--version"],
            "build --method pls": [py, "-m", "bandsolve.cli", "build", "--method", "pls",
                                   "--spectra", str(spectra), "--concentrations", str(conc),
                                   "--out", str(model), "--quiet"],
        }
        best: dict[str, tuple[float, float]] = {}
        if not args.no_bytecode_cache:
            for cmd in cmds.values():  # fills the bytecode cache
                model.unlink(missing_ok=True)
                run(cmd, env)
        for _ in range(args.repeats):
            for name, cmd in cmds.items():
                model.unlink(missing_ok=True)
                wall, cpu = run(cmd, env)
                old = best.get(name, (np.inf, np.inf))
                best[name] = (min(wall, old[0]), min(cpu, old[1]))
    cache = "no bytecode cache" if args.no_bytecode_cache else "bytecode cache"
    print(f"best of {args.repeats} (each a fresh process, {cache}), {args.n} x {args.p} "
          "calibration:")
    for name, (wall, cpu) in best.items():
        print(f"  {name:22s} wall {wall:6.2f} s   CPU {cpu:6.2f} s")


if __name__ == "__main__":
    main()
