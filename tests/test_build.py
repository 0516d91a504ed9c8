"""Checks a demanding user relies on: warnings at build, refused options, partial coverage."""

from __future__ import annotations

import warnings

import numpy as np
import pytest

from bandsolve.calibration.build import build_cls, build_cls_from_absorptivities
from bandsolve.cli import main
from bandsolve.concentrations import ConcentrationTable
from bandsolve.errors import BandsolveWarning
from bandsolve.spectra import SpectralSet

from .conftest import gaussian_bands

AXIS = np.linspace(400.0, 700.0, 151)
K = gaussian_bands(AXIS, (480, 530, 590), (40, 45, 40))
FOREIGN = 0.1 * np.exp(-0.5 * ((AXIS - 650) / 15) ** 2)


def _set(values, prefix):
    return SpectralSet(AXIS, values, [f"{prefix}{i}" for i in range(len(values))])


def test_absorptivity_model_flags_foreign_band_only_with_blanks():
    rng = np.random.default_rng(1)
    eps = SpectralSet(AXIS, K, ["a [mg/L]", "b [mg/L]", "c [mg/L]"], quantity="absorptivity")
    blanks = _set(rng.normal(0, 0.002, (10, AXIS.size)), "blank")
    C = rng.uniform(0.2, 0.8, (200, 3))
    clean = _set(C @ K + rng.normal(0, 0.002, (200, AXIS.size)), "u")
    foreign = _set(clean.values + FOREIGN, "f")
    with pytest.warns(BandsolveWarning, match="no residual limit"):
        blind = build_cls_from_absorptivities(eps, 1.0)
    assert not blind.predict(foreign)["flag_codes"].str.contains("residual").any()
    assert "--blanks" in blind.predict(foreign)["notes"][0]
    with warnings.catch_warnings():
        warnings.simplefilter("error", BandsolveWarning)
        model = build_cls_from_absorptivities(
            eps, 1.0, blanks=blanks, validated_range=dict.fromkeys(eps.sample_ids, (0.0, 1.0)))
    # White noise: rᵀr/σ² ~ χ²(p − m); the limit at α = 0.01 flags ~1 % of clean spectra.
    assert model.predict(clean)["flag_codes"].str.contains("residual").mean() <= 0.04
    assert model.predict(foreign)["flag_codes"].str.contains("residual").all()


def test_missing_absorber_in_cls_calibration_is_warned_with_blanks():
    rng = np.random.default_rng(2)
    C = rng.uniform(0, 1, (25, 3))
    spectra = _set(C @ K + rng.normal(0, 0.002, (25, AXIS.size)), "cal")
    only_a = ConcentrationTable(spectra.sample_ids, ["a [mg/L]"], C[:, :1])
    blanks = _set(rng.normal(0, 0.002, (10, AXIS.size)), "blank")
    with pytest.warns(BandsolveWarning, match="missing from the model"):
        build_cls(spectra, only_a, blanks=blanks)
    full = ConcentrationTable(spectra.sample_ids, ["a", "b", "c"], C)
    with warnings.catch_warnings():
        warnings.simplefilter("error", BandsolveWarning)
        build_cls(spectra, full, blanks=blanks)


def test_windowed_model_needs_only_the_window_covered():
    rng = np.random.default_rng(3)
    C = rng.uniform(0, 1, (20, 3))
    spectra = _set(C @ K + rng.normal(0, 0.002, (20, AXIS.size)), "cal")
    table = ConcentrationTable(spectra.sample_ids, ["a", "b", "c"], C)
    cal = build_cls(spectra, table, window=[(450, 650)])
    narrow_axis = np.linspace(440.0, 660.0, 111)  # covers the window, not 400–700
    narrow_k = gaussian_bands(narrow_axis, (480, 530, 590), (40, 45, 40))
    res = cal.predict(SpectralSet(narrow_axis, C[:3] @ narrow_k, ["x", "y", "z"]))
    np.testing.assert_allclose(res[["a", "b", "c"]].to_numpy(), C[:3], atol=0.02)
    with pytest.raises(Exception, match="450"):
        cal.predict(SpectralSet(np.linspace(500, 700, 50), np.ones((1, 50)), ["w"]))


def test_options_of_the_other_method_are_refused(tmp_path, capsys):
    code = main(["build", "--method", "cls", "--components", "3", "--spectra", "s.csv",
                 "--concentrations", "c.csv", "--out", str(tmp_path / "m.bsm")])
    assert code == 2 and "--components applies only to --method pls" in capsys.readouterr().err
    code = main(["build", "--method", "pls", "--absorptivity", "e.csv", "--path-length", "1",
                 "--out", str(tmp_path / "m.bsm")])
    assert code == 2 and "--absorptivity" in capsys.readouterr().err


def test_file_system_errors_are_one_line(tmp_path, capsys):
    blocker = tmp_path / "afile"
    blocker.write_text("x")
    assert main(["demo", "--out", str(blocker)]) == 2
    err = capsys.readouterr().err.strip()
    assert len(err.splitlines()) == 1 and "afile" in err and "Traceback" not in err


def test_group_cross_validation_with_text_labels(tmp_path, capsys):
    # Replicates of one physical sample share a text label; groups:COLUMN keeps them together.
    import pandas as pd

    rng = np.random.default_rng(4)
    C = rng.uniform(0, 1, (24, 3))
    ids = [f"m{i:02d}" for i in range(24)]
    spectra = pd.DataFrame(C @ K + rng.normal(0, 0.002, (24, AXIS.size)),
                           columns=[f"{w:g}" for w in AXIS])
    spectra.insert(0, "sample", ids)
    spectra.to_csv(tmp_path / "s.csv", index=False)
    conc = pd.DataFrame(C, columns=["a [mg/L]", "b [mg/L]", "c [mg/L]"])
    conc.insert(0, "sample", ids)
    conc["day"] = [f"day{i % 4}" for i in range(24)]
    conc.to_csv(tmp_path / "c.csv", index=False)
    code = main(["build", "--method", "pls", "--spectra", str(tmp_path / "s.csv"),
                 "--concentrations", str(tmp_path / "c.csv"), "--cv", "groups:day",
                 "--out", str(tmp_path / "m.bsm")])
    assert code == 0, capsys.readouterr().err
    from bandsolve.calibration.modelfile import load_model

    model = load_model(tmp_path / "m.bsm")
    assert model.analytes == ("a [mg/L]", "b [mg/L]", "c [mg/L]")  # the label is no analyte
    assert model.selection.models[0].cv == "groups"


def test_two_standards_per_analyte_and_a_blank_build_cleanly():
    # A common standards set: each analyte's standards are the only rows carrying it, so a
    # leave-one-out fold can lack an analyte; the model must still build, with figures of merit.
    rng = np.random.default_rng(5)
    C = np.vstack([np.diag([v] * 3) for v in (0.4, 0.8)] + [np.zeros((1, 3))])
    spectra = _set(C @ K + rng.normal(0, 0.002, (len(C), AXIS.size)), "std")
    cal = build_cls(spectra, ConcentrationTable(spectra.sample_ids, ["a", "b", "c"], C))
    assert cal.merit is not None
    res = cal.predict(_set(np.array([[0.5, 0.2, 0.3]]) @ K, "u"))
    np.testing.assert_allclose(res[["a", "b", "c"]].to_numpy()[0], [0.5, 0.2, 0.3], atol=0.02)


def test_negative_flag_without_standard_error():
    # Two wavelengths, two analytes: no SE; a clearly negative estimate is still flagged.
    eps = SpectralSet(np.array([440.0, 545.0]), [[374.0, 9.0], [95.0, 2375.0]],
                      ["x [mol/L]", "y [mol/L]"], quantity="absorptivity")
    with pytest.warns(BandsolveWarning):
        model = build_cls_from_absorptivities(eps, 1.0)
    res = model.predict(SpectralSet(np.array([440.0, 545.0]), [[-0.3, 0.7]], ["u"]))
    assert "negative:x [mol/L]" in res.loc[0, "flag_codes"]


def test_nan_in_a_spectrum_is_a_clear_error():
    rng = np.random.default_rng(6)
    C = rng.uniform(0, 1, (20, 3))
    spectra = _set(C @ K + rng.normal(0, 0.002, (20, AXIS.size)), "cal")
    from bandsolve.calibration.build_pls import build_pls

    model = build_pls(spectra, ConcentrationTable(spectra.sample_ids, ["a", "b", "c"], C),
                      components=3, cv="interleaved:5")
    X = spectra.values[:2].copy()
    X[1, 10] = np.nan
    with pytest.raises(Exception, match="NaN or infinite"):
        model.detail(X)
