"""Invented report scenarios for layout checks: m analytes, a batch of n routine spectra.

The data are invented (Gaussian bands, uniform random mixtures, white noise, a few spectra
with an unmodelled band) and exist only to exercise the report's layout at the sizes a
laboratory meets: 2 to 10 analytes, 1 to 100,000 routine samples.
"""

from __future__ import annotations

import shutil
import subprocess
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from bandsolve.calibration.build import build_cls
from bandsolve.calibration.model import Calibration
from bandsolve.concentrations import ConcentrationTable
from bandsolve.spectra import SpectralSet

INVENTED = "INVENTED DATA for layout tests: not measurements"


@dataclass(frozen=True)
class Scenario:
    cal: Calibration
    spectra: SpectralSet
    table: ConcentrationTable
    batch: pd.DataFrame


def _bands(m: int, axis: np.ndarray) -> np.ndarray:
    centres = np.linspace(260.0, 560.0, m)
    width = 300.0 / m
    return np.vstack([np.exp(-0.5 * ((axis - c) / width) ** 2) for c in centres])


def scenario(m: int, n_batch: int, *, pure_standards: bool = False,
             random_state: int = 12345) -> Scenario:
    """A CLS model of ``m`` invented analytes and a batch table of ``n_batch`` rows.

    ``pure_standards``: the calibration holds three levels of each pure analyte and blanks
    (else random mixtures). About 1 % of the batch (at least one spectrum when n ≥ 3) carries
    a band the model does not know, so the residual flag is raised.
    """
    rng = np.random.default_rng(random_state)
    axis = np.linspace(220.0, 600.0, 96)
    K = _bands(m, axis)
    names = tuple(f"compound {chr(65 + k)} [mg/L]" for k in range(m))
    if pure_standards:
        C = np.vstack([np.eye(m) * level for level in (0.2, 0.5, 1.0)] + [np.zeros((2, m))])
    else:
        C = rng.uniform(0.0, min(1.0, 5.0 / m), (max(3 * m, 12), m))
    ids = [f"std-{i + 1:02d}" for i in range(len(C))]
    X = C @ K + rng.normal(0.0, 2e-3, (len(C), axis.size))
    spectra = SpectralSet(axis, X, ids, source="invented-calibration.csv")
    table = ConcentrationTable(ids, names, C, source="invented-concentrations.csv")
    cal = build_cls(spectra, table, provenance={"data_label": INVENTED})
    low, high = C.min(axis=0), C.max(axis=0)
    Cb = low + (high - low) * rng.uniform(0.15, 0.85, (n_batch, m))
    Xb = Cb @ K + rng.normal(0.0, 2e-3, (n_batch, axis.size))
    bad = rng.choice(n_batch, size=max(1 if n_batch >= 3 else 0, n_batch // 100),
                     replace=False)
    Xb[bad] += 0.3 * np.exp(-0.5 * ((axis - 400.0) / 15.0) ** 2)
    width = len(str(n_batch))
    batch_ids = [f"R{i + 1:0{width}d}" for i in range(n_batch)]
    batch = cal.predict(SpectralSet(axis, Xb, batch_ids, source="invented-routine.csv"))
    return Scenario(cal, spectra, table, batch)


def chromium() -> str | None:
    """The headless browser used for the rendering checks, or None."""
    if Path("/usr/bin/chromium").exists():
        return "/usr/bin/chromium"
    return shutil.which("chromium") or shutil.which("chromium-browser")


def printed_text(page: Path, folder: Path) -> str:
    """Print an HTML page to PDF (A4, as the report's print style asks) with headless
    Chromium and return the PDF's text (pdftotext); skips when either tool is missing."""
    browser, to_text = chromium(), shutil.which("pdftotext")
    if browser is None or to_text is None:
        pytest.skip("Chromium and pdftotext (poppler-utils) are needed for the print check")
    pdf = folder / "printed.pdf"
    run = subprocess.run([browser, "--headless", "--no-sandbox", "--disable-gpu",
                          "--no-first-run", f"--user-data-dir={folder / 'profile'}",
                          "--no-pdf-header-footer", f"--print-to-pdf={pdf}", page.as_uri()],
                         capture_output=True, timeout=300, check=False)
    assert run.returncode == 0 and pdf.stat().st_size > 0
    return subprocess.run([to_text, str(pdf), "-"], capture_output=True, timeout=180,
                          check=True).stdout.decode("utf-8")
