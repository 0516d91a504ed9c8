"""Benchmark: ``bandsolve predict`` on a large wide CSV against what a user would do by hand.

Run on demand (not collected by pytest)::

    /work/main/.venv/bin/python tests/benchmarks/bench_read.py [--n 200000] [--p 300]
        [--sizes 50000,200000] [--jobs 1,2] [--repeats 2]

For each file size it writes a wide CSV of n simulated spectra × p wavelengths (4 overlapping
bands, 5 decimals, about 2.4 kB per row: 200,000 rows is ~480 MB), builds a CLS model on 60
mixtures, then times, each in its own child process:

* **bandsolve**: ``bandsolve predict MODEL FILE --out results.csv`` (``--jobs`` as given),
  the whole command: start-up, reading with every check, prediction with diagnostics and
  flags, the results file written atomically;
* **by hand**: ``pandas.read_csv`` of the same file, ``Calibration.predict`` on the array,
  and the results written by ``pyarrow.csv.write_csv`` (the fastest CSV writer at hand);

and prints wall and CPU time, the ratio (target: within 1.5x) and the peak memory (target:
under 400 MB whatever the file size): resident memory summed over the process and its worker
processes when psutil is installed, else the largest single process. It also times a ``.npy``
spectral image of the same spectra (``predict`` writing maps) against ``numpy.load`` +
``predict`` + ``numpy.save``.
Numbers depend on the machine's load: the two sides are run alternately, best of
``--repeats``.
"""

from __future__ import annotations

import argparse
import contextlib
import importlib.util
import os
import subprocess
import sys
import tempfile
import textwrap
import threading
import time
from pathlib import Path

import numpy as np

from bandsolve.calibration.build import build_cls
from bandsolve.calibration.modelfile import save_model
from bandsolve.concentrations import ConcentrationTable
from bandsolve.spectra import SpectralSet

BY_HAND = textwrap.dedent("""
    import sys, numpy as np, pandas as pd, pyarrow as pa, pyarrow.csv as pacsv
    from bandsolve.calibration.modelfile import load_model
    from bandsolve.spectra import SpectralSet
    model, path, out = load_model(sys.argv[1]), sys.argv[2], sys.argv[3]
    frame = pd.read_csv(path, index_col=0)
    spectra = SpectralSet(axis=frame.columns.astype(float).to_numpy(), values=frame.to_numpy(),
                          sample_ids=frame.index.astype(str).tolist(), source=path)
    del frame
    results = model.predict(spectra)
    pacsv.write_csv(pa.Table.from_pandas(results, preserve_index=False), out)
""")

NPY_BY_HAND = textwrap.dedent("""
    import sys, numpy as np
    from bandsolve.calibration.modelfile import load_model
    model, path, out = load_model(sys.argv[1]), sys.argv[2], sys.argv[3]
    cube = np.load(path, mmap_mode="r")
    flat = cube.reshape(-1, cube.shape[-1])
    maps = np.vstack([model.detail(np.asarray(flat[i:i + 16384])).concentrations
                      for i in range(0, flat.shape[0], 16384)])
    np.save(out, maps.reshape(cube.shape[0], cube.shape[1], -1))
""")


def bands(p: int) -> tuple[np.ndarray, np.ndarray]:
    axis = np.linspace(400.0, 700.0, p)
    return axis, np.vstack([np.exp(-0.5 * ((axis - c) / 40) ** 2) for c in (450, 500, 560, 620)])


def make_model(axis, pure, rng, path: Path) -> None:
    C = rng.uniform(0.1, 1.0, (60, 4))
    X = C @ pure + 0.002 * rng.standard_normal((60, axis.size))
    ids = [f"cal{i}" for i in range(60)]
    table = ConcentrationTable(ids, tuple(f"dye {k} [mg/L]" for k in "ABCD"), C)
    save_model(build_cls(SpectralSet(axis=axis, values=X, sample_ids=ids), table), path)


def write_csv(path: Path, axis, pure, n: int, rng) -> None:
    """A wide CSV: 2,000 simulated spectra formatted once, cycled under distinct ids (the
    parsing cost is that of distinct values; only the writing is shortened)."""
    X = rng.uniform(0.05, 0.5, (2000, 4)) @ pure + 0.002 * rng.standard_normal((2000, axis.size))
    pool = [",".join(f"{v:.5f}" for v in row) for row in X]
    with open(path, "w") as handle:
        handle.write("sample," + ",".join(f"{a:.4f}" for a in axis) + "\n")
        for start in range(0, n, 10_000):
            handle.write("".join(f"x{i},{pool[i % 2000]}\n"
                                 for i in range(start, min(start + 10_000, n))))


def _tree_peak(pid: int, done: threading.Event, peak: list[int]) -> None:
    """Largest resident memory summed over ``pid`` and its descendants (worker processes),
    sampled every 20 ms."""
    import psutil

    try:
        root = psutil.Process(pid)
        while not done.is_set():
            total = 0
            for proc in [root, *root.children(recursive=True)]:
                with contextlib.suppress(psutil.Error):
                    total += proc.memory_info().rss
            peak[0] = max(peak[0], total)
            time.sleep(0.02)
    except psutil.Error:
        pass


def run(cmd: list[str]) -> tuple[float, float, float]:
    """Wall time (s), CPU time (s) and peak memory (MB) of one child process and its workers.

    CPU is user + system time from ``wait4`` (workers included once they have been waited
    for). Memory is the resident memory of the whole process tree (summed, sampled) when
    psutil is installed, else the largest single process (``wait4``).
    """
    start = time.perf_counter()
    proc = subprocess.Popen(cmd, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
    done, peak = threading.Event(), [0]
    if importlib.util.find_spec("psutil"):
        threading.Thread(target=_tree_peak, args=(proc.pid, done, peak), daemon=True).start()
    _, status, usage = os.wait4(proc.pid, 0)
    done.set()
    elapsed = time.perf_counter() - start
    err = proc.stderr.read().decode() if proc.stderr else ""
    if os.waitstatus_to_exitcode(status) != 0:
        raise SystemExit(f"{' '.join(cmd)} failed: {err}")
    mb = max(peak[0] / 2**20, usage.ru_maxrss / 1024)
    return elapsed, usage.ru_utime + usage.ru_stime, mb


def best(cmds: dict[str, list[str]], repeats: int) -> dict[str, tuple[float, float, float]]:
    """Best wall and CPU time and the largest peak memory of each command, run alternately."""
    out: dict[str, tuple[float, float, float]] = {}
    for _ in range(repeats):
        for name, cmd in cmds.items():
            t, cpu, mb = run(cmd)
            old = out.get(name, (np.inf, np.inf, 0.0))
            out[name] = (min(t, old[0]), min(cpu, old[1]), max(mb, old[2]))
    return out


def report(title: str, times: dict[str, tuple[float, float, float]]) -> None:
    base, base_cpu = times["by hand"][:2]
    print(f"\n{title}")
    for name, (t, cpu, mb) in times.items():
        print(f"  {name:20s} {t:7.2f} s ({t / base:5.2f}x by hand)  CPU {cpu:7.2f} s "
              f"({cpu / base_cpu:5.2f}x)  peak {mb:6.0f} MB")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--p", type=int, default=300)
    parser.add_argument("--sizes", default="50000,200000")
    parser.add_argument("--jobs", default="1,2")
    parser.add_argument("--repeats", type=int, default=2)
    parser.add_argument("--no-npy", action="store_true")
    args = parser.parse_args()
    rng = np.random.default_rng(7)
    axis, pure = bands(args.p)
    py = sys.executable
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        model = folder / "model.bsm"
        make_model(axis, pure, rng, model)
        for n in (int(s) for s in args.sizes.split(",")):
            data = folder / f"wide{n}.csv"
            write_csv(data, axis, pure, n, rng)
            size = data.stat().st_size / 1e6
            cmds = {"by hand": [py, "-c", BY_HAND, str(model), str(data), str(folder / "h.csv")]}
            for jobs in args.jobs.split(","):
                cmds[f"bandsolve --jobs {jobs}"] = [
                    py, "-m", "bandsolve.cli", "predict", str(model), str(data), "--out",
                    str(folder / f"r{jobs}.csv"), "--quiet", "--jobs", jobs]
            report(f"{n} spectra x {args.p} points, {size:.0f} MB CSV", best(cmds, args.repeats))
            data.unlink()
            if args.no_npy or n != max(int(s) for s in args.sizes.split(",")):
                continue
            rows = n // 500
            cube = folder / "image.npy"
            X = rng.uniform(0.05, 0.5, (rows * 500, 4)) @ pure
            np.save(cube, X.reshape(rows, 500, args.p))
            del X
            cmds = {"by hand": [py, "-c", NPY_BY_HAND, str(model), str(cube),
                                str(folder / "maps.npy")],
                    "bandsolve": [py, "-m", "bandsolve.cli", "predict", str(model), str(cube),
                                  "--out", str(folder / "maps")]}
            report(f".npy spectral image {rows} x 500 x {args.p}", best(cmds, args.repeats))
            cube.unlink()


if __name__ == "__main__":
    main()
