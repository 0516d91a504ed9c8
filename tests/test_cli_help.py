"""Every command's --help: each option and positional argument explains itself, no line is
wider than a terminal of 100 columns."""

from __future__ import annotations

import argparse

import pytest

from bandsolve.cli import build_parser, main


def _subcommands() -> dict[str, argparse.ArgumentParser]:
    parser = build_parser()
    action = next(a for a in parser._actions if isinstance(a, argparse._SubParsersAction))
    return dict(action.choices)


def test_every_option_of_every_command_has_help():
    missing = []
    for name, sub in _subcommands().items():
        for action in sub._actions:
            if isinstance(action, argparse._HelpAction):
                continue
            if not (action.help or "").strip() or action.help == argparse.SUPPRESS:
                missing.append(f"{name} {'/'.join(action.option_strings) or action.dest}")
    assert not missing, missing


@pytest.mark.parametrize("command", sorted(_subcommands()))
def test_help_prints_and_exits_cleanly(command, capsys, monkeypatch):
    monkeypatch.setenv("COLUMNS", "100")
    with pytest.raises(SystemExit) as stop:
        main([command, "--help"])
    assert stop.value.code == 0
    text = capsys.readouterr().out
    assert text.startswith("usage: bandsolve " + command)
    # Every option string appears in the help text the user sees.
    for action in _subcommands()[command]._actions:
        for option in action.option_strings:
            assert option in text, option


def _model(tmp_path, method="cls"):
    from bandsolve.cli.demo_data import write_demo_data

    files = write_demo_data(tmp_path / "demo")
    out = tmp_path / f"{method}.bsm"
    extra = ["--cv", "interleaved:5", "--max-components", "5"] if method == "pls" else []
    assert main(["build", "--method", method, "--spectra", str(files.calibration_spectra),
                 "--concentrations", str(files.calibration_concentrations),
                 "--blanks", str(files.blanks), *extra, "--out", str(out)]) == 0
    return out, files


@pytest.mark.parametrize("method", ["cls", "pls"])
def test_inspect_shows_limits_explains_abbreviations_and_fits_100_columns(method, tmp_path,
                                                                          capsys):
    model, _ = _model(tmp_path, method)
    capsys.readouterr()
    assert main(["inspect", str(model)]) == 0
    text = capsys.readouterr().out
    assert max(len(line) for line in text.splitlines()) <= 100  # common practice: 100 columns
    assert "diagnostic limits" in text.lower() and "Hotelling T²" in text and "leverage" in text
    for words in ("SEN sensitivity", "LOD, LOQ detection and quantitation limits",
                  "univ. the best single wavelength", "validated for its intended use"):
        assert words in " ".join(text.split()), words


def test_build_predict_and_ledger_print_the_caution(tmp_path, capsys):
    model, files = _model(tmp_path)
    assert "validated for its intended use" in " ".join(capsys.readouterr().err.split())
    ledger = tmp_path / "runs.sqlite"
    main(["predict", str(model), str(files.routine[0]), "--out", str(tmp_path / "r.csv"),
          "--ledger", str(ledger), "--quiet"])
    assert "validated for its intended use" in " ".join(capsys.readouterr().err.split())
    assert main(["ledger", str(ledger)]) == 0
    assert "validated for its intended use" in " ".join(capsys.readouterr().err.split())


def test_rmsecv_table_keeps_full_labels_fits_100_columns_and_explains_p(tmp_path):
    import dataclasses

    from bandsolve.calibration.modelfile import load_model

    model, _ = _model(tmp_path, "pls")
    cal = load_model(model)
    long = tuple(f"4-nitrophenol isomer {i} [mg/L]" for i in range(len(cal.analytes)))
    text = dataclasses.replace(cal, analytes=long).selection.curves(long)
    assert all(label in text for label in long)  # no header cut short
    assert max(len(line) for line in text.splitlines()) <= 100
    assert "- : not tested" in text
    pvalues = [p for ev in cal.selection.models for p in ev.pvalues if p is not None]
    # 1/(999 + 1): the smallest p-value 999 permutations can give (Good 2005, permutation
    # tests), so it is reported as an upper bound.
    if min(pvalues) <= 0.001:
        assert "≤ 0.001" in text
