"""The command line starts without importing what the chosen command does not need.

Checked through ``sys.modules`` in a fresh interpreter (no timing asserts): plotting and the
statistics library account for most of the start-up time, and ``--version`` needs neither.
"""

from __future__ import annotations

import json
import subprocess
import sys

import numpy as np
import pytest

from bandsolve.cli import COMMANDS, build_parser, main

HEAVY = ("matplotlib", "scipy.stats", "sklearn", "pandas")


def _loaded_after(code: str) -> list[str]:
    probe = (f"import sys\n{code}\n"
             f"import json; print(json.dumps([m for m in {HEAVY!r} if m in sys.modules]))")
    out = subprocess.run([sys.executable, "-c", probe], capture_output=True, text=True,
                         check=True)
    return json.loads(out.stdout.strip().splitlines()[-1])


def test_importing_the_cli_loads_no_heavy_library():
    assert _loaded_after("import bandsolve.cli") == []


def test_version_loads_no_heavy_library():
    code = ("from bandsolve.cli import main\n"
            "try:\n    main(['--version'])\nexcept SystemExit:\n    pass")
    assert _loaded_after(code) == []


@pytest.mark.slow
def test_one_command_does_not_load_plotting():
    # `build --help` imports the build command only; the report command is the one that plots.
    code = ("from bandsolve.cli import main\n"
            "try:\n    main(['build', '--help'])\nexcept SystemExit:\n    pass")
    assert "matplotlib" not in _loaded_after(code)


@pytest.mark.parametrize("name", sorted(COMMANDS))
def test_each_command_module_registers_its_name(name):
    parser = build_parser([name])
    sub = next(a for a in parser._actions if a.dest == "==SUPPRESS==" or a.choices)
    assert list(sub.choices) == [name]


def test_full_help_lists_every_command(capsys):
    with pytest.raises(SystemExit):
        main(["--help"])
    out = capsys.readouterr().out
    for name in COMMANDS:
        assert name in out


def test_unknown_command_is_a_usage_error(capsys):
    with pytest.raises(SystemExit) as exc:
        main(["bulid"])
    assert exc.value.code == 2  # EXIT_INPUT
    assert "invalid choice" in capsys.readouterr().err


@pytest.mark.slow
def test_building_loads_only_what_building_needs(tmp_path):
    # A whole `build --method pls` (reading, cross-validation, model file) imports neither
    # plotting nor the commands' other packages (designs, batches, reports, evaluation, charts).
    # The statistics library and pandas come with scikit-learn's base class, so they are not
    # asked about here.
    rng = np.random.default_rng(12345)
    axis = np.linspace(400.0, 700.0, 31)
    conc = rng.uniform(0.1, 1.0, (30, 2))
    pure = np.vstack([np.exp(-0.5 * ((axis - c) / 40.0) ** 2) for c in (480, 590)])
    spectra = conc @ pure + 0.002 * rng.standard_normal((30, axis.size))
    ids = [f"s{i}" for i in range(30)]
    (tmp_path / "s.csv").write_text("sample," + ",".join(map(str, axis)) + "\n" + "".join(
        f"{s}," + ",".join(f"{v:.6f}" for v in row) + "\n"
        for s, row in zip(ids, spectra, strict=True)))
    (tmp_path / "c.csv").write_text("sample,A [mg/L],B [mg/L]\n" + "".join(
        f"{s},{a:.4f},{b:.4f}\n" for s, (a, b) in zip(ids, conc, strict=True)))
    args = ["build", "--method", "pls", "--spectra", str(tmp_path / "s.csv"),
            "--concentrations", str(tmp_path / "c.csv"), "--out", str(tmp_path / "m.bsm"),
            "--quiet"]
    unwanted = ("matplotlib", "bandsolve.report", "bandsolve.design", "bandsolve.batch",
                "bandsolve.evaluate", "bandsolve.monitor")
    code = (f"import sys\nfrom bandsolve.cli import main\nassert main({args!r}) == 0\n"
            f"print([m for m in sys.modules if m.startswith({unwanted!r})])")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         check=True)
    assert json.loads(out.stdout.strip().splitlines()[-1].replace("'", '"')) == []
    assert (tmp_path / "m.bsm").is_file()


@pytest.mark.parametrize("method", ["pls", "cls"])
def test_a_build_loads_neither_scikit_learn_nor_scipy_stats(tmp_path, method):
    # The whole build (reading, cross-validation, limits, figures of merit, model file) runs
    # on bandsolve's estimator base, folds and distribution functions; scikit-learn and
    # scipy.stats are imported only when a user's own objects need them.
    rng = np.random.default_rng(12)
    axis = np.linspace(400.0, 600.0, 41)
    pure = np.vstack([np.exp(-0.5 * ((axis - c) / 30.0) ** 2) for c in (460, 540)])
    conc = rng.uniform(0.1, 1.0, (24, 2))
    spectra = conc @ pure + 0.002 * rng.standard_normal((24, axis.size))  # invented data
    ids = [f"s{i}" for i in range(24)]
    (tmp_path / "spectra.csv").write_text(
        "sample," + ",".join(f"{a:g}" for a in axis) + "\n"
        + "".join(f"{s}," + ",".join(f"{v:.6f}" for v in row) + "\n"
                  for s, row in zip(ids, spectra, strict=True)))
    (tmp_path / "conc.csv").write_text(
        "sample,a [mg/L],b [mg/L]\n"
        + "".join(f"{s},{c[0]:.4f},{c[1]:.4f}\n" for s, c in zip(ids, conc, strict=True)))
    args = ["build", "--method", method, "--spectra", str(tmp_path / "spectra.csv"),
            "--concentrations", str(tmp_path / "conc.csv"), "--out",
            str(tmp_path / "model.bsm"), "--quiet"]
    code = (f"from bandsolve.cli import main\ntry:\n    main({args!r})\n"
            "except SystemExit as exc:\n    assert not exc.code, exc.code")
    assert _loaded_after(code) == ["pandas"]
    assert (tmp_path / "model.bsm").is_file()
