"""Models from an absorptivity table: a stated validated range, no leverage where none
exists, and exact path-length scaling by Beer's law."""

from __future__ import annotations

import numpy as np
import pytest

from bandsolve.calibration.build import build_cls, build_cls_from_absorptivities
from bandsolve.cli import main
from bandsolve.concentrations import ConcentrationTable
from bandsolve.errors import BandsolveWarning, DataError
from bandsolve.spectra import SpectralSet

from .conftest import gaussian_bands

AXIS = np.linspace(400.0, 700.0, 151)
EPS = gaussian_bands(AXIS, (480, 530, 590), (40, 45, 40))  # AU per (mg/L · cm)
LABELS = ("a [mg/L]", "b [mg/L]", "c [mg/L]")
RANGE = dict.fromkeys(LABELS, (0.0, 1.0))


def _table():
    return SpectralSet(AXIS, EPS, LABELS, quantity="absorptivity")


def _blanks(rng):
    return SpectralSet(AXIS, rng.normal(0, 0.002, (10, AXIS.size)),
                       [f"blank{i}" for i in range(10)])


def _samples(C, path, rng, noise=0.002):
    # Beer's law for mixtures: A = b Σ ε_k c_k (common practice).
    A = path * C @ EPS + rng.normal(0, noise, (len(C), AXIS.size))
    return SpectralSet(AXIS, A, [f"s{i}" for i in range(len(C))], path_length_cm=path)


def test_half_centimetre_cell_is_scaled_exactly():
    rng = np.random.default_rng(12345)
    blanks = _blanks(rng)
    one_cm = build_cls_from_absorptivities(_table(), 1.0, blanks=blanks, validated_range=RANGE)
    half_cm = build_cls_from_absorptivities(_table(), 0.5, blanks=blanks,
                                            validated_range=RANGE)
    C = rng.uniform(0.1, 0.9, (50, 3))
    spectra = _samples(C, 0.5, rng)
    scaled = one_cm.predict(spectra)
    # Reference: the model built directly for a 0.5 cm cell (K = ε·b, Beer's law).
    direct = half_cm.predict(spectra)
    numeric = list(direct.select_dtypes("number").columns)
    assert len(numeric) >= 4 * len(LABELS)  # estimate, SE and interval ends of each analyte
    np.testing.assert_allclose(scaled[numeric].to_numpy(float), direct[numeric].to_numpy(float),
                               rtol=1e-10, equal_nan=True)
    assert (scaled["flag_codes"] == direct["flag_codes"]).all()
    assert "scaled from 1 cm by Beer's law" in scaled["notes"][0]
    # White noise 0.002 AU: estimates within 5 standard errors of the truth.
    for k, label in enumerate(LABELS):
        assert np.all(np.abs(scaled[label] - C[:, k]) < 5 * scaled[f"{label} SE"])


def test_model_from_standards_refuses_another_cell_and_says_why():
    rng = np.random.default_rng(1)
    C = rng.uniform(0.1, 0.9, (15, 3))
    ids = [f"cal{i}" for i in range(15)]
    standards = SpectralSet(AXIS, C @ EPS + rng.normal(0, 0.002, (15, AXIS.size)), ids,
                            path_length_cm=1.0)
    model = build_cls(standards, ConcentrationTable(ids, LABELS, C))
    with pytest.raises(DataError, match=r"cannot be scaled to another cell exactly.*absorptivity"):
        model.predict(_samples(C[:2], 0.5, rng))


def test_leverage_is_empty_not_zero_without_a_calibration_set():
    rng = np.random.default_rng(2)
    model = build_cls_from_absorptivities(_table(), 1.0, blanks=_blanks(rng),
                                          validated_range=RANGE)
    res = model.predict(_samples(rng.uniform(0.1, 0.9, (5, 3)), 1.0, rng))
    assert res["leverage_ratio"].isna().all() and res["t2_ratio"].isna().all()


def test_validated_range_flags_results_outside_it_and_is_asked_for():
    rng = np.random.default_rng(3)
    with pytest.warns(BandsolveWarning, match="no validated range stated for c"):
        model = build_cls_from_absorptivities(_table(), 1.0, blanks=_blanks(rng),
                                              validated_range={"a [mg/L]": (0.0, 1.0),
                                                               "b [mg/L]": (0.0, 1.0)})
    res = model.predict(_samples(np.array([[2.0, 0.5, 5.0]]), 1.0, rng, noise=1e-4))
    codes = res["flag_codes"][0]
    assert "above_range:a [mg/L]" in codes and "c [mg/L]" not in codes  # c has no top
    with pytest.raises(DataError, match="no such component"):
        build_cls_from_absorptivities(_table(), 1.0, validated_range={"d [mg/L]": (0, 1)})


def test_command_line_states_the_validated_range(tmp_path, capsys):
    eps = tmp_path / "eps.csv"
    rows = [",".join(["component", *(f"{w:g}" for w in AXIS)])]
    rows += [",".join([label, *(f"{v:.6g}" for v in row)]) for label, row in zip(LABELS, EPS,
                                                                                  strict=True)]
    eps.write_text("\n".join(rows) + "\n", encoding="utf-8")
    out = tmp_path / "m.bsm"
    assert main(["build", "--method", "cls", "--absorptivity", str(eps), "--path-length", "1",
                 "--validated-range", "a=0-2 mg/L", "b=0-3 mg/L", "c=0-4 mg/L",
                 "--out", str(out)]) == 0
    assert main(["inspect", str(out)]) == 0
    text = capsys.readouterr().out
    rows = {line.split("  ")[0]: line for line in text.splitlines()}
    assert rows["a [mg/L]"].endswith("0 to 2") and rows["c [mg/L]"].endswith("0 to 4")
