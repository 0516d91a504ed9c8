"""Batch prediction: bad files reported without stopping the batch, chunk/job-independent
results, output formats, exit codes, spectral images."""

from __future__ import annotations

import io
import json

import numpy as np
import pandas as pd
import pytest

from bandsolve.batch.images import predict_cube
from bandsolve.batch.predict import EVAL_ROWS, predict_inputs
from bandsolve.batch.writers import format_for
from bandsolve.calibration.build import build_cls
from bandsolve.calibration.modelfile import save_model
from bandsolve.cli import main
from bandsolve.concentrations import ConcentrationTable
from bandsolve.errors import FormatError
from bandsolve.flags import FLAG_BITS
from bandsolve.io import write_spectra_csv
from bandsolve.spectra import SpectralSet

from .conftest import gaussian_bands

AXIS = np.linspace(400.0, 700.0, 121)
PURE = gaussian_bands(AXIS, (480, 530, 590), (40, 45, 40))
LABELS = ("A [mg/L]", "B [mg/L]", "C [mg/L]")
NOISE = 0.001


def _mixtures(n: int, rs: int, axis=AXIS, prefix="s"):
    rng = np.random.default_rng(rs)
    C = rng.uniform(0.1, 1.0, (n, 3))
    pure = gaussian_bands(axis, (480, 530, 590), (40, 45, 40))
    X = C @ pure + NOISE * rng.standard_normal((n, axis.size))
    return SpectralSet(axis=axis, values=X, sample_ids=[f"{prefix}{i}" for i in range(n)]), C


@pytest.fixture(scope="module")
def model():
    spectra, C = _mixtures(30, 1, prefix="cal")
    return build_cls(spectra, ConcentrationTable(spectra.sample_ids, LABELS, C))


@pytest.fixture(scope="module")
def model_file(model, tmp_path_factory):
    path = tmp_path_factory.mktemp("model") / "m.bsm"
    save_model(model, path)
    return path


@pytest.fixture
def folder(tmp_path):
    """Good files, a corrupt file, another covering grid, an uncovered grid, a NaN file."""
    d = tmp_path / "in"
    d.mkdir()
    truth = {}
    for name, rs in (("good1", 10), ("good2", 11)):
        s, C = _mixtures(5, rs, prefix=f"{name}-")
        write_spectra_csv(s, d / f"{name}.csv")
        truth.update(zip(s.sample_ids, C, strict=True))
    fine, C = _mixtures(4, 12, axis=np.linspace(390.0, 710.0, 321), prefix="fine-")
    write_spectra_csv(fine, d / "finegrid.csv")
    truth.update(zip(fine.sample_ids, C, strict=True))
    short, _ = _mixtures(3, 13, axis=np.linspace(450.0, 700.0, 101), prefix="short-")
    write_spectra_csv(short, d / "short.csv")
    (d / "corrupt.csv").write_bytes(b"\x00\xff\x13garbage\x00\n\x01\x02")
    good, _ = _mixtures(4, 14, prefix="nan-")
    write_spectra_csv(good, d / "nan.csv")
    lines = (d / "nan.csv").read_text().splitlines()
    lines[-1] = ",".join([*lines[-1].split(",")[:5], "nan", *lines[-1].split(",")[6:]])
    (d / "nan.csv").write_text("\n".join(lines) + "\n")
    return d, truth


def test_batch_predicts_every_good_spectrum_and_reports_each_bad_file(
        folder, model_file, tmp_path, capsys):
    d, truth = folder
    out = tmp_path / "results.csv"
    code = main(["predict", str(model_file), str(d), "--out", str(out)])
    err = capsys.readouterr().err
    # Exit code 3 when some inputs could not be read (documented in bandsolve.cli).
    assert code == 3
    table = pd.read_csv(out, keep_default_na=False)
    assert sorted(table["sample"]) == sorted(truth)
    for bad in ("corrupt.csv", "short.csv", "nan.csv"):
        assert f"skipped {d / bad}" in err
    assert "400-450 nm is needed" in err  # the uncovered range is named
    assert "not a finite number" in err
    fine = table[table["sample"].str.startswith("fine-")]
    assert fine["notes"].str.contains("resampled").all()
    # CLS estimates lie within a few standard errors of the truth (Haaland & Thomas 1988,
    # Anal. Chem. 60, 1193: Cov(ĉ) = σ²(KKᵀ)⁻¹); 5 SE is never reached by chance here
    # (common practice). Resampling a smooth band by linear interpolation adds < 1e-4 AU.
    for k, label in enumerate(LABELS):
        est = table[label].to_numpy(float)
        true = np.array([truth[s][k] for s in table["sample"]])
        se = table[f"{label} SE"].to_numpy(float)
        assert np.all(np.abs(est - true) < 5 * se + 1e-3)


@pytest.mark.slow
def test_bad_file_contributes_no_rows_even_when_streamed(model, tmp_path):
    s, _ = _mixtures(2 * EVAL_ROWS + 5, 20)
    path = tmp_path / "late-nan.csv"
    write_spectra_csv(s, path)
    lines = path.read_text().splitlines()
    lines[-2] = lines[-2].replace(lines[-2].split(",")[3], "nan", 1)
    path.write_text("\n".join(lines) + "\n")
    good, _ = _mixtures(3, 21, prefix="ok")
    write_spectra_csv(good, tmp_path / "ok.csv")
    res = predict_inputs(model, [str(path), str(tmp_path / "ok.csv")],
                         read_options={"layout": "wide"}, chunk_size=7)
    assert list(res.table["sample"]) == list(good.sample_ids)
    assert [f.input for f in res.failures] == [str(path)]


@pytest.mark.slow
def test_results_do_not_depend_on_chunk_size_or_jobs(model, tmp_path):
    s, _ = _mixtures(EVAL_ROWS + 40, 30)
    path = tmp_path / "many.csv"
    write_spectra_csv(s, path)
    small, _ = _mixtures(9, 31, prefix="small")
    write_spectra_csv(small, tmp_path / "small.csv")
    files = [str(path), str(tmp_path / "small.csv")]
    options = {"layout": "wide"}  # streamed line by line
    ref = predict_inputs(model, files, read_options=options, chunk_size=10_000).table
    assert len(ref) == s.n_samples + small.n_samples
    for chunk, jobs in ((1, 1), (7, 1), (7, 2), (10_000, 2)):
        got = predict_inputs(model, files, read_options=options, chunk_size=chunk,
                             n_jobs=jobs).table
        # Bit-identical (check_exact): the issue asks for identical output whatever the
        # chunking (common practice for reproducible batch results).
        pd.testing.assert_frame_equal(got, ref, check_exact=True)


def test_formats_hold_the_same_numbers(model_file, folder, tmp_path, capsys):
    d, _ = folder
    files = [str(d / "good1.csv"), str(d / "finegrid.csv")]
    tables = {}
    for fmt in ("csv", "json", "parquet"):
        out = tmp_path / f"r.{fmt}"
        assert main(["predict", str(model_file), *files, "--out", str(out)]) == 0
        if fmt == "csv":
            tables[fmt] = pd.read_csv(out, keep_default_na=False)
        elif fmt == "json":
            tables[fmt] = pd.DataFrame(json.loads(out.read_text()))
        else:
            pytest.importorskip("pyarrow")
            tables[fmt] = pd.read_parquet(out)
    numeric = [c for c in tables["csv"].columns
               if c not in ("sample", "source", "flag_codes", "interval_basis", "notes",
                             "t2_ratio")]
    for fmt in ("json", "parquet"):
        assert list(tables[fmt].columns) == list(tables["csv"].columns)
        # CSV and JSON write shortest round-trip reprs, Parquet stores binary doubles
        # (IEEE 754-2008): all three give back the same doubles.
        np.testing.assert_array_equal(tables[fmt][numeric].to_numpy(float),
                                      tables["csv"][numeric].to_numpy(float))
        assert list(tables[fmt]["flag_codes"]) == list(tables["csv"]["flag_codes"])
    capsys.readouterr()


def test_fail_on_flags_exit_code_and_stdin(model_file, capsys, monkeypatch):
    s, _ = _mixtures(3, 40)
    alien = s.values.copy()
    alien[1] += 0.2 * np.exp(-0.5 * ((AXIS - 650) / 8) ** 2)  # an unmodelled absorber
    flagged = SpectralSet(axis=AXIS, values=alien, sample_ids=s.sample_ids)
    buf = io.StringIO()
    flagged.to_frame().to_csv(buf)
    monkeypatch.setattr("sys.stdin", io.TextIOWrapper(io.BytesIO(buf.getvalue().encode())))
    # Exit code 4 with --fail-on-flags when a result is flagged (documented in bandsolve.cli).
    assert main(["predict", str(model_file), "-", "--fail-on-flags"]) == 4
    out = pd.read_csv(io.StringIO(capsys.readouterr().out), keep_default_na=False)
    assert list(out["flag_codes"] != "") == [False, True, False]
    assert "residual" in out["flag_codes"][1]
    monkeypatch.setattr("sys.stdin", io.TextIOWrapper(io.BytesIO(buf.getvalue().encode())))
    assert main(["predict", str(model_file), "-"]) == 0


def test_spectral_image_gives_maps_equal_to_the_table(model, tmp_path):
    rows, cols = 6, 7
    s, _ = _mixtures(rows * cols, 50)
    values = s.values.copy()
    values[3] += 0.2 * np.exp(-0.5 * ((AXIS - 650) / 8) ** 2)
    cube_path = tmp_path / "image.npy"
    np.save(cube_path, values.reshape(rows, cols, AXIS.size))
    res = predict_cube(model, cube_path, tmp_path / "maps", chunk_size=5)
    assert "assumed" in res.notes  # no sidecar axis: the model's axis is used
    flat = SpectralSet(axis=AXIS, values=values, sample_ids=[f"p{i}" for i in range(rows * cols)])
    ref = model.predict(flat)
    for label, path in res.maps.items():
        np.testing.assert_array_equal(np.load(path), ref[label].to_numpy().reshape(rows, cols))
    flags = np.load(res.flag_map)
    assert flags.dtype == np.uint16 and flags.shape == (rows, cols)
    assert flags.reshape(-1)[3] & FLAG_BITS["residual"]
    assert ((flags.reshape(-1) != 0) == (ref["flag_codes"] != "").to_numpy()).all()
    np.save(tmp_path / "image.axis.npy", AXIS)  # a sidecar axis is used when present
    assert predict_cube(model, cube_path, tmp_path / "maps2").notes == ""


def test_no_results_file_when_every_input_fails(folder, model_file, tmp_path, capsys):
    d, _ = folder
    out = tmp_path / "f.csv"
    bad = [str(d / "corrupt.csv"), str(d / "short.csv")]
    # Exit code 3 when inputs could not be read (documented in bandsolve.cli).
    assert main(["predict", str(model_file), *bad, "--out", str(out)]) == 3
    err = capsys.readouterr().err
    assert not out.exists()
    assert "0 spectra predicted" in err and f"{out} was not written" in err
    assert "results in" not in err
    out.write_text("yesterday's results\n")  # an older file is left as it was
    assert main(["predict", str(model_file), *bad, "--out", str(out)]) == 3
    assert out.read_text() == "yesterday's results\n"
    capsys.readouterr()


@pytest.mark.parametrize("name", ["r.xlsx", "r.txt", "results"])
def test_an_unknown_output_ending_is_refused_unless_a_format_is_given(
        name, folder, model_file, tmp_path, capsys):
    d, _ = folder
    out = tmp_path / name
    # Exit code 2 for bad options (documented in bandsolve.cli).
    assert main(["predict", str(model_file), str(d / "good1.csv"), "--out", str(out)]) == 2
    err = capsys.readouterr().err
    assert not out.exists()
    assert all(f in err for f in ("csv", "json", "parquet")) and "--format" in err
    assert main(["predict", str(model_file), str(d / "good1.csv"), "--out", str(out),
                 "--format", "json"]) == 0
    assert len(json.loads(out.read_text())) == 5
    capsys.readouterr()


def test_known_endings_choose_the_format():
    # The three endings the writers support, case-insensitive; standard output is CSV.
    assert [format_for(n, None) for n in ("a.csv", "b.JSON", "c.parquet", None, "-")] == [
        "csv", "json", "parquet", "csv", "csv"]
    with pytest.raises(FormatError, match=r"\.xlsx.*\.csv, \.json, \.parquet"):
        format_for("r.xlsx", None)


def test_round_option_rounds_the_file_and_fail_on_flags_outranks_skipped_inputs(tmp_path):
    import pandas as pd

    from bandsolve.batch.overview import se_decimals
    from bandsolve.cli import EXIT_FLAGGED, main
    from bandsolve.cli.demo_data import write_demo_data

    files = write_demo_data(tmp_path / "demo")
    model = tmp_path / "m.bsm"
    assert main(["build", "--method", "cls", "--spectra", str(files.calibration_spectra),
                 "--concentrations", str(files.calibration_concentrations),
                 "--out", str(model)]) == 0
    bad = tmp_path / "bad.csv"
    bad.write_text("not,a spectrum\nx\n", encoding="utf-8")
    out = tmp_path / "r.csv"
    # The last routine batch carries an unmodelled absorber, so some result is flagged.
    code = main(["predict", str(model), *map(str, files.routine), str(bad), "--round",
                 "--fail-on-flags", "--quiet", "--out", str(out)])
    assert code == EXIT_FLAGGED  # documented: 4 outranks 3
    table = pd.read_csv(out)
    label = next(c for c in table.columns if c.endswith(" SE"))[:-3]
    for value, se in zip(table[label], table[f"{label} SE"], strict=True):
        d = int(se_decimals([se])[0])
        # GUM 7.2.6: value rounded to the decimal place of the SE's second digit.
        assert round(value, d) == value


def test_flag_count_leaves_out_the_rows_of_an_input_that_failed(model, tmp_path):
    from bandsolve.batch.predict import run_batch

    rng = np.random.default_rng(12345)
    # Spectra far outside the calibration (every one flagged), then a cell that is not a number
    # after the first evaluation block: the input fails after rows were already predicted.
    alien = SpectralSet(axis=AXIS, values=2.5 + rng.uniform(0, 1, (EVAL_ROWS + 5, AXIS.size)),
                        sample_ids=[f"a{i}" for i in range(EVAL_ROWS + 5)])
    write_spectra_csv(alien, tmp_path / "alien.csv")
    text = (tmp_path / "alien.csv").read_text().splitlines()
    text[-2] = text[-2].rsplit(",", 1)[0] + ",x"
    (tmp_path / "alien.csv").write_text("\n".join(text) + "\n")
    good, _ = _mixtures(4, 7)
    write_spectra_csv(good, tmp_path / "good.csv")
    alone = run_batch(model, [str(tmp_path / "good.csv")], [], read_options={"layout": "wide"})
    for jobs in (1, 2):
        summary = run_batch(model, [str(tmp_path / "alien.csv"), str(tmp_path / "good.csv")],
                            [], read_options={"layout": "wide"}, n_jobs=jobs)
        assert [f.input for f in summary.failures] == [str(tmp_path / "alien.csv")]
        # Only committed rows count: the 4 routine mixtures, flagged as when read alone (the
        # failed input's 8,192 predicted and flagged rows are not in the results).
        assert (summary.n_predicted, summary.n_flagged) == (4, alone.n_flagged)
        assert alone.n_flagged <= 4
