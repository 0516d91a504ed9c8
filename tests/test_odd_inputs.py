"""Inputs that used to crash or be skipped without a word: dollar signs in sample ids (figure
text is not mathematics) and broken symbolic links in input folders."""

from __future__ import annotations

import os

import numpy as np
import pytest

from bandsolve.batch.predict import predict_inputs
from bandsolve.calibration.build import build_cls
from bandsolve.calibration.modelfile import save_model
from bandsolve.cli import main
from bandsolve.concentrations import ConcentrationTable
from bandsolve.errors import FormatError
from bandsolve.io import read_spectra, write_spectra_csv
from bandsolve.report import render_report
from bandsolve.spectra import SpectralSet

from .conftest import gaussian_bands

AXIS = np.linspace(400.0, 700.0, 41)
PURE = gaussian_bands(AXIS, (480, 560), (40, 45))


@pytest.fixture
def model():
    rng = np.random.default_rng(9)
    C = rng.uniform(0.1, 1.0, (12, 2))
    cal = SpectralSet(axis=AXIS, values=C @ PURE + 1e-3 * rng.standard_normal((12, 41)),
                      sample_ids=[f"c{i}" for i in range(12)])
    return build_cls(cal, ConcentrationTable(cal.sample_ids, ("A [mg/L]", "B [mg/L]"), C))


def test_dollar_signs_in_sample_ids_do_not_break_the_report(model, tmp_path):
    # Each id holds an even number of "$" with text matplotlib's mathtext cannot parse.
    ids = ["lot$^$7", "$_$", "price $5 and $6", r"$\frac$"]
    routine = SpectralSet(axis=AXIS, values=np.random.default_rng(1).uniform(0.1, 1, (4, 2))
                          @ PURE, sample_ids=ids)
    write_spectra_csv(routine, tmp_path / "r.csv")
    batch = predict_inputs(model, [str(tmp_path / "r.csv")])
    html = render_report(model, batch=batch)
    assert "lot$^$7" in html and "price $5 and $6" in html


def test_broken_link_in_an_input_folder_is_reported(model, tmp_path, capsys):
    folder = tmp_path / "batch"
    folder.mkdir()
    routine = SpectralSet(axis=AXIS, values=np.random.default_rng(2).uniform(0.1, 1, (2, 2))
                          @ PURE, sample_ids=["r0", "r1"])
    write_spectra_csv(routine, folder / "good.csv")
    (folder / "gone.csv").symlink_to(tmp_path / "deleted.csv")
    result = predict_inputs(model, [str(folder)])
    assert len(result.table) == 2
    assert [f.input for f in result.failures] == [str(folder / "gone.csv")]
    assert "symbolic link" in result.failures[0].reason
    save_model(model, tmp_path / "m.bsm")
    # Exit 3: some inputs could not be read (documented in bandsolve.cli).
    assert main(["predict", str(tmp_path / "m.bsm"), str(folder), "--out",
                 str(tmp_path / "o.csv")]) == 3
    assert "gone.csv" in capsys.readouterr().err


def test_broken_link_in_a_folder_of_single_spectra_is_refused(tmp_path):
    folder = tmp_path / "singles"
    folder.mkdir()
    for i in range(2):
        np.savetxt(folder / f"s{i}.csv", np.column_stack([AXIS, PURE[0] * (i + 1)]),
                   delimiter=",")
    os.symlink(tmp_path / "nothing.csv", folder / "s9.csv")
    with pytest.raises(FormatError, match="symbolic link"):
        read_spectra(folder)
