"""Benchmark: prediction with a transferred (PDS) model against the same model untransferred.

Run on demand (not collected by pytest)::

    .venv/bin/python tests/benchmarks/bench_transfer.py [--n 100000]

Builds a CLS model on the simulated instrument of ``tests/instruments.py`` (171 points), moves
it to a second instrument by PDS with 10 transfer samples, and times on the same n spectra

* plain: ``Calibration.detail`` of the original model (what a full recalibration costs per
  spectrum);
* transferred: ``detail`` of the transferred model (map + the same model);
* map (banded): ``Transfer.map_spectra`` alone;
* map (dense): ``X @ F + b``, what a user would write with the stored matrix.

Reports the best of 5 repeats and the ratios transferred/plain and dense/banded.
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from bandsolve.calibration.build import build_cls
from bandsolve.calibration.transferred import transfer_calibration
from bandsolve.transfer import kennard_stone
from tests.instruments import Instrument, design, spectra, table


def _best(fn, repeats: int = 5) -> float:
    times = []
    for _ in range(repeats):
        start = time.perf_counter()
        fn()
        times.append(time.perf_counter() - start)
    return min(times)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--n", type=int, default=100_000)
    n = parser.parse_args().n
    rng = np.random.default_rng(1)
    C = design()
    A1 = Instrument().measure(C, rng)
    model = build_cls(spectra(A1, "c"), table(C, "c"), baseline="offset")
    idx = kennard_stone(A1, 10)
    moved = transfer_calibration(model, spectra(A1[idx], "c"),
                                 spectra(Instrument(shift=0.5).measure(C[idx], rng), "c"))
    X = np.tile(A1, (-(-n // len(A1)), 1))[:n]
    F, b = moved.transfer.matrix, moved.transfer.offset
    times = {"plain": _best(lambda: model.detail(X)),
             "transferred": _best(lambda: moved.detail(X)),
             "map (banded)": _best(lambda: moved.transfer.map_spectra(X)),
             "map (dense)": _best(lambda: X @ F + b)}
    print(f"{n} spectra x {X.shape[1]} points")
    for name, seconds in times.items():
        print(f"  {name:14s} {seconds:7.3f} s")
    print(f"transferred / plain: {times['transferred'] / times['plain']:.1f}x; "
          f"dense / banded map: {times['map (dense)'] / times['map (banded)']:.1f}x")


if __name__ == "__main__":
    main()
