"""The bundled demo: an invented dye-house rinse-water monitor.

Everything here is INVENTED for demonstration: three fictitious dyes (dye A, dye B, dye C)
with broad, heavily overlapping visible bands built from Gaussian shapes, calibration
mixtures from a 5-level cyclic design, a validation set, blank replicates, and two routine
batches, the second of which carries a fourth absorber the calibration has never seen. The
data are generated with a fixed random state so the files are the same on every machine.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from bandsolve.io.atomic import atomic_write, output_folder

__all__ = ["DEMO_LABEL", "DemoFiles", "write_demo_data", "demo_pure_spectra", "bands",
           "measure", "write_spectra", "write_concentrations"]

DEMO_LABEL = ("INVENTED demo data (bandsolve dye-house rinse-water scenario, generated with a "
              "fixed random state); not measurements of any real substance")
RANDOM_STATE = 20261201
WAVELENGTHS = np.arange(380.0, 722.0, 2.0)  # nm
NOISE_AU = 0.002
PATH_LENGTH_CM = 1.0
#: Results table of each demo model (the CLS one is the demo's main result).
RESULT_FILES = {"cls": "results.csv", "pls": "results-pls.csv"}
#: (name, unit, low, high, bands as (centre nm, width nm, peak AU per unit concentration))
DYES = (
    ("dye A", "mg/L", 0.0, 12.0, ((432.0, 38.0, 0.050), (478.0, 30.0, 0.018))),
    ("dye B", "mg/L", 0.0, 10.0, ((508.0, 42.0, 0.060), (548.0, 30.0, 0.025))),
    ("dye C", "mg/L", 0.0, 8.0, ((590.0, 45.0, 0.070), (632.0, 32.0, 0.030))),
)
#: The unexpected absorber in routine batch 2 (also invented): a band the model never saw.
INTRUDER = ((655.0, 28.0, 0.25), (450.0, 60.0, 0.05))


@dataclass
class DemoFiles:
    """Paths of the generated demo files."""

    folder: Path
    calibration_spectra: Path
    calibration_concentrations: Path
    validation_spectra: Path
    validation_concentrations: Path
    blanks: Path
    routine: list[Path] = field(default_factory=list)


def bands(spec: tuple[tuple[float, float, float], ...], *, extra_width: float = 0.0,
          shift: float = 0.0) -> np.ndarray:
    """Gaussian bands on the demo grid; an instrument with ``extra_width`` (σ, nm, added in
    quadrature, band area kept) and its axis ``shift`` nm off sees them broader and moved."""
    out = np.zeros_like(WAVELENGTHS)
    for c, w, h in spec:
        wide = np.hypot(w, extra_width)
        out = out + h * w / wide * np.exp(-0.5 * ((WAVELENGTHS - shift - c) / wide) ** 2)
    return out


def demo_pure_spectra() -> np.ndarray:
    """The invented pure-component spectra, absorbance per mg/L in a 1 cm cell, (3, p)."""
    return np.vstack([bands(d[4]) for d in DYES])


def analyte_labels() -> list[str]:
    """Analyte column labels of the demo, with units."""
    return [f"{name} [{unit}]" for name, unit, *_ in DYES]


def measure(conc: np.ndarray, rng: np.random.Generator, intruder: np.ndarray | None = None
             ) -> np.ndarray:
    """Absorbance = Beer's law mixture + small cell offset + white noise (all invented)."""
    A = conc @ demo_pure_spectra()
    A += rng.normal(0.0, 0.001, (len(conc), 1))  # cell positioning offset
    A += rng.normal(0.0, NOISE_AU, A.shape)
    if intruder is not None:
        A += intruder[:, None] * bands(INTRUDER)[None, :]
    return A


def write_spectra(path: Path, ids: list[str], A: np.ndarray, note: str) -> None:
    frame = pd.DataFrame(np.round(A, 5), columns=[f"{w:g}" for w in WAVELENGTHS])
    frame.insert(0, "sample", ids)
    with atomic_write(path, "w", newline="") as handle:
        handle.write(f"# {DEMO_LABEL}\n# {note}\n# quantity: absorbance\n# axis_unit: nm\n"
                     f"# path_length_cm: {PATH_LENGTH_CM:g}\n")
        frame.to_csv(handle, index=False)


def write_concentrations(path: Path, frame: pd.DataFrame) -> None:
    with atomic_write(path, "w", newline="") as handle:
        handle.write(f"# {DEMO_LABEL}\n")
        frame.round(4).to_csv(handle, index_label="sample")


def write_demo_data(folder: str | Path) -> DemoFiles:
    """Generate the invented demo files into ``folder`` (same content on every run)."""
    from bandsolve.design import calibration_plan, parse_analyte_range

    folder = output_folder(folder, option="--out")
    output_folder(folder / "routine")
    rng = np.random.default_rng(RANDOM_STATE)
    ranges = [parse_analyte_range(f"{n}={lo:g}-{hi:g} {u}") for n, u, lo, hi, _ in DYES]
    plan = calibration_plan(ranges, levels=5, n_validation=8, validation_decimals=2,
                            random_state=RANDOM_STATE)
    conc = plan.concentrations
    cal = conc[conc.index.str.startswith("cal")]
    val = conc[conc.index.str.startswith("val")]
    files = DemoFiles(
        folder=folder,
        calibration_spectra=folder / "calibration_spectra.csv",
        calibration_concentrations=folder / "calibration_concentrations.csv",
        validation_spectra=folder / "validation_spectra.csv",
        validation_concentrations=folder / "validation_concentrations.csv",
        blanks=folder / "blank_spectra.csv",
    )
    write_spectra(files.calibration_spectra, list(cal.index), measure(cal.to_numpy(), rng),
                   "calibration mixtures of a 5-level cyclic design")
    write_concentrations(files.calibration_concentrations, cal)
    write_spectra(files.validation_spectra, list(val.index), measure(val.to_numpy(), rng),
                   "independent validation mixtures")
    write_concentrations(files.validation_concentrations, val)
    write_spectra(files.blanks, [f"blank-{i:02d}" for i in range(1, 11)],
                   measure(np.zeros((10, 3)), rng), "replicate blanks (rinse water, no dye)")
    lows = np.array([d[2] for d in DYES])
    highs = np.array([d[3] for d in DYES])
    batch1 = lows + rng.uniform(0.1, 0.9, (6, 3)) * (highs - lows)
    batch2 = lows + rng.uniform(0.1, 0.9, (5, 3)) * (highs - lows)
    intruder = np.array([0.0, 0.0, 1.0, 0.0, 0.6])
    for name, c, extra, note in (
        ("batch-1", batch1, None, "routine rinse samples"),
        ("batch-2", batch2, intruder,
         "routine rinse samples; two carry an unexpected fourth absorber"),
    ):
        path = folder / "routine" / f"{name}.csv"
        ids = [f"{name}-{i:02d}" for i in range(1, len(c) + 1)]
        write_spectra(path, ids, measure(c, rng, extra), note)
        files.routine.append(path)
    truth = pd.DataFrame(np.vstack([batch1, batch2]), columns=analyte_labels(),
                         index=[f"batch-1-{i:02d}" for i in range(1, 7)]
                         + [f"batch-2-{i:02d}" for i in range(1, 6)])
    write_concentrations(folder / "routine_true_concentrations.csv", truth)
    return files
