"""Simulated spectrophotometers for transfer tests: the same mixtures seen by two instruments.

Three overlapping Gaussian bands on a 2 nm grid. An instrument differs from the original by
an extra slit width (Gaussian, added in quadrature to every band's width, area kept), an
axis offset (features appear at ``λ + shift``), a photometric gain and a baseline (offset and
slope). Every spectrum also carries day-to-day effects: gain jitter 0.5 %, axis jitter
0.05 nm, baseline offset and slope 0.002 AU, and white noise 0.002 AU.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from bandsolve.concentrations import ConcentrationTable
from bandsolve.spectra import SpectralSet

AXIS = np.arange(380.0, 722.0, 2.0)
ANALYTES = ("a [mg/L]", "b [mg/L]", "c [mg/L]")
HIGH = np.array([12.0, 10.0, 8.0])
#: (centre nm, width nm, peak AU per mg/L) per analyte
BANDS = (((432.0, 38.0, 0.050), (478.0, 30.0, 0.018)),
         ((508.0, 42.0, 0.060), (548.0, 30.0, 0.025)),
         ((590.0, 45.0, 0.070), (632.0, 32.0, 0.030)))


@dataclass(frozen=True)
class Instrument:
    slit: float = 0.0       # extra Gaussian width (sigma, nm)
    shift: float = 0.0      # axis offset, nm
    gain: float = 1.0
    offset: float = 0.0     # AU
    slope: float = 0.0      # AU across the range

    def pure(self, jitter: float = 0.0) -> np.ndarray:
        out = np.zeros((len(BANDS), AXIS.size))
        for k, bands in enumerate(BANDS):
            for centre, width, height in bands:
                w = np.hypot(width, self.slit)
                out[k] += height * width / w * np.exp(
                    -0.5 * ((AXIS - self.shift - jitter - centre) / w) ** 2)
        return out

    def measure(self, C: np.ndarray, rng: np.random.Generator) -> np.ndarray:
        x = (AXIS - AXIS.mean()) / np.ptp(AXIS)
        rows = [self.gain * (1 + 0.005 * rng.normal()) * (c @ self.pure(0.05 * rng.normal()))
                for c in C]
        A = np.array(rows) + self.offset + self.slope * x
        A += rng.normal(0, 0.002, (len(C), 1)) + rng.normal(0, 0.002, (len(C), 1)) * x
        return A + rng.normal(0, 0.002, A.shape)


def spectra(A: np.ndarray, prefix: str) -> SpectralSet:
    return SpectralSet(axis=AXIS, values=A, sample_ids=[f"{prefix}{i}" for i in range(len(A))])


def table(C: np.ndarray, prefix: str) -> ConcentrationTable:
    return ConcentrationTable(sample_ids=[f"{prefix}{i}" for i in range(len(C))],
                              analytes=ANALYTES, values=C)


def design() -> np.ndarray:
    """The 25-mixture, 5-level cyclic calibration design over 0–HIGH."""
    from bandsolve.design import calibration_plan, parse_analyte_range

    ranges = [parse_analyte_range(f"{a.split()[0]}=0-{h:g} mg/L")
              for a, h in zip(ANALYTES, HIGH, strict=True)]
    return calibration_plan(ranges, levels=5, n_validation=0).concentrations.to_numpy()
