"""The Calibration contract: frozen, typed records, one alignment helper, a readable summary."""

from __future__ import annotations

import dataclasses
from pathlib import Path

import numpy as np
import pytest

from bandsolve.calibration.modelfile import load_model
from bandsolve.calibration.records import ComponentChoice, EstimatorLimits, Limits, Selection
from bandsolve.cautions import SHORT_CAUTION
from bandsolve.concentrations import ConcentrationTable
from bandsolve.errors import DataError
from bandsolve.spectra import SpectralSet

MODELS = Path(__file__).resolve().parents[1] / "models"
DEMO = Path(__file__).resolve().parents[1] / "examples" / "rinse-water"


@pytest.fixture(scope="module")
def cls_model():
    return load_model(MODELS / "rinse-cls.bsm")


@pytest.fixture(scope="module")
def pls_model():
    return load_model(MODELS / "rinse-pls.bsm")


def test_a_calibration_cannot_be_changed_in_place(cls_model):
    with pytest.raises(dataclasses.FrozenInstanceError):
        cls_model.ceiling = 3.0
    with pytest.raises(ValueError, match="read-only"):
        cls_model.axis[0] = 0.0
    with pytest.raises(TypeError):
        cls_model.settings["alpha"] = 0.5
    changed = dataclasses.replace(cls_model, ceiling=3.0)
    assert changed.ceiling == 3.0 and cls_model.ceiling != 3.0


def test_records_round_trip_through_their_dictionaries(cls_model, pls_model):
    for cal in (cls_model, pls_model):  # repr: the NaN limits of CLS compare unequal
        assert repr(Limits.from_dict(cal.limits.to_dict())) == repr(cal.limits)
    assert Selection.from_dict(pls_model.selection.to_dict()) == pls_model.selection
    choice = pls_model.selection.models[0]
    assert isinstance(choice, ComponentChoice)
    np.testing.assert_array_equal(choice.chosen_rmsecv(),
                                  np.asarray(choice.rmsecv)[choice.n_components - 1])
    with pytest.raises(Exception, match="limits entry is damaged"):
        EstimatorLimits.from_dict({"alpha": 0.01})


def test_align_puts_references_in_the_model_order_by_sample_id(cls_model):
    from bandsolve.io import read_concentrations, read_spectra

    spectra = read_spectra(DEMO / "validation_spectra.csv")
    table = read_concentrations(DEMO / "validation_concentrations.csv")
    # The same table with its rows reversed and its columns in another order.
    order = list(reversed(range(len(table.sample_ids))))
    swapped = ConcentrationTable([table.sample_ids[i] for i in order], table.analytes[::-1],
                                 np.asarray(table.values)[order][:, ::-1])
    a, b = cls_model.align(spectra, table), cls_model.align(spectra, swapped)
    assert a.sample_ids == spectra.sample_ids == b.sample_ids
    np.testing.assert_array_equal(a.reference, b.reference)
    np.testing.assert_array_equal(a.X, spectra.values)  # already on the model grid
    unitless = ConcentrationTable(table.sample_ids, [n.split(" [")[0] for n in table.analytes],
                                  table.values)
    with pytest.raises(DataError, match=r"its column is 'dye A': convert"):
        cls_model.align(spectra, unitless)


def test_summary_shows_the_model_on_one_page(pls_model):
    text = pls_model.summary()
    lines = text.splitlines()
    assert max(len(line) for line in lines) <= 78
    for a, (lo, hi) in zip(pls_model.analytes, pls_model.calibrated_range, strict=True):
        row = next(line for line in lines if line.startswith(a))
        assert row.endswith(f"{lo:g} to {hi:g}")
    assert " ".join(SHORT_CAUTION.split()) in " ".join(text.split())
    lod = next(line for line in lines if line.startswith("LOD"))
    assert lod.split()[-3:] == [format(r.lod, ".4g") for r in pls_model.merit.analytes]
    assert "3 component(s) by the randomization rule" in text


def test_selection_curves_mark_the_chosen_count(pls_model):
    text = pls_model.selection.curves(pls_model.analytes)
    chosen = [line for line in text.splitlines() if line.startswith(" *")]
    assert len(chosen) == 1 and chosen[0].split()[1] == str(
        pls_model.selection.models[0].n_components)


def test_an_unknown_method_is_refused(cls_model):
    from bandsolve.errors import ModelError

    with pytest.raises(ModelError, match="unknown method 'xyz'"):
        dataclasses.replace(cls_model, method="xyz")


def test_spectra_on_another_grid_are_resampled_once(cls_model):
    axis = np.asarray(cls_model.axis)
    fine = np.linspace(axis[0], axis[-1], 2 * axis.size - 1)
    pure = cls_model.estimators[0].component_spectra()
    K = np.vstack([np.interp(fine, axis, row) for row in pure])
    spectra = SpectralSet(fine, np.array([[1.0, 2.0, 3.0]]) @ K, ["s"])
    aligned = cls_model.align(spectra)
    assert aligned.X.shape == (1, axis.size) and any("resampled" in n for n in aligned.notes)


def test_repr_is_one_short_line(cls_model):
    text = repr(cls_model)
    # A repr for the interactive prompt (common practice): one line, no array dump.
    assert "\n" not in text and len(text) < 300 and "array" not in text
    assert text.startswith("Calibration(method='cls'") and cls_model.analytes[0] in text
