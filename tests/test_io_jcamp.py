"""JCAMP-DX reader, checked on hand-written files and on data compressed by a tiny encoder
written here from the rules of the standard (McDonald & Wilks 1988, Appl. Spectrosc. 42,
151-162: SQZ digits @A-I/a-i, DIF digits %J-R/j-r, DUP counts S-Z/s, DIF Y check)."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from bandsolve.errors import FormatError
from bandsolve.io import read_jcamp, read_spectra


def _sqz(n: int) -> str:
    digits = str(abs(n))
    return ("@ABCDEFGHI" if n >= 0 else "@abcdefghi")[int(digits[0])] + digits[1:]


def _dif(n: int) -> str:
    digits = str(abs(n))
    return ("%JKLMNOPQR" if n >= 0 else "%jklmnopqr")[int(digits[0])] + digits[1:]


def _dup(count: int) -> str:
    digits = str(count)
    return "STUVWXYZs"[int(digits[0]) - 1] + digits[1:]


def _encode(ys: list[int], first_x: int, per_line: int, check_line: bool) -> list[str]:
    """SQZ first value, then DIF with DUP for runs; each new line repeats the previous line's
    last value (the Y check), and optionally a final check line closes the table."""
    lines = []
    start = 0
    while start < len(ys) - 1 or not lines:
        chunk = ys[start:start + per_line + 1]
        tokens = [_sqz(chunk[0])]
        diffs = np.diff(chunk).tolist()
        i = 0
        while i < len(diffs):
            run = 1
            while i + run < len(diffs) and diffs[i + run] == diffs[i]:
                run += 1
            tokens.append(_dif(diffs[i]) + (_dup(run) if run > 1 else ""))
            i += run
        lines.append(f"{first_x + start}{''.join(tokens)}")
        start += len(chunk) - 1
    if check_line and len(ys) > 1:
        lines.append(f"{first_x + len(ys) - 1}{_sqz(ys[-1])}")
    return lines


def _jcamp(data_lines, *, n, first_x=400, yfactor=0.001, title="mix 1", extra="",
           yunits="ABSORBANCE", xunits="NANOMETERS", last_x=None):
    last_x = first_x + n - 1 if last_x is None else last_x
    return "\n".join([
        f"##TITLE={title}", "##JCAMP-DX=4.24  $$ hand written", "##DATA TYPE=UV/VIS SPECTRUM",
        f"##XUNITS={xunits}", f"##YUNITS={yunits}", "##XFACTOR=1", f"##YFACTOR={yfactor}",
        f"##FIRSTX={first_x}", f"##LASTX={last_x}", f"##NPOINTS={n}", *([extra] if extra else []),
        "##XYDATA=(X++(Y..Y))", *data_lines, "##END=",
    ]) + "\n"


def _write(tmp_path: Path, text: str, name: str = "s.jdx") -> Path:
    path = tmp_path / name
    path.write_text(text, encoding="ascii")
    return path


KNOWN = [0, 5, 10, 15, 15, 15, 15, 3, -20, -20, 100, 1234, 1230, 1226, 1222, 1222, 7, 0, -9, -999]


def test_encoder_follows_the_standard_character_tables():
    # values from the character tables of McDonald & Wilks 1988
    assert _sqz(0) == "@" and _sqz(-25) == "b5" and _sqz(1234) == "A234"
    assert _dif(0) == "%" and _dif(-3) == "l" and _dif(12) == "J2"
    assert _dup(2) == "T" and _dup(9) == "s" and _dup(10) == "S0"
    assert _encode([1, 2, 3, 3], 400, 10, False) == ["400AJT%"]


@pytest.mark.parametrize(("per_line", "check_line"), [(4, True), (7, False), (50, False)])
def test_compressed_asdf_decodes_to_the_encoded_numbers(tmp_path, per_line, check_line):
    lines = _encode(KNOWN, 400, per_line, check_line)
    s = read_jcamp(_write(tmp_path, _jcamp(lines, n=len(KNOWN))))
    # expected: the integers the encoder was given, times YFACTOR (McDonald & Wilks 1988)
    np.testing.assert_allclose(s.values[0], np.array(KNOWN) * 0.001, rtol=0, atol=1e-12)
    np.testing.assert_array_equal(s.axis, np.arange(400.0, 400.0 + len(KNOWN)))
    assert s.sample_ids == ("mix 1",) and s.quantity == "absorbance" and s.axis_unit == "nm"


@pytest.mark.filterwarnings("ignore::bandsolve.errors.BandsolveWarning")
@settings(max_examples=60, deadline=None,
          suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(st.lists(st.integers(-50, 50), min_size=2, max_size=60).map(
           lambda d: np.cumsum(d).tolist()),
       st.integers(1, 12), st.booleans())
def test_asdf_round_trip_property(tmp_path, ys, per_line, check_line):
    lines = _encode(ys, 200, per_line, check_line)
    s = read_jcamp(_write(tmp_path, _jcamp(lines, n=len(ys), first_x=200, yfactor=1)))
    np.testing.assert_array_equal(s.values[0], ys)  # the encoded integers (standard's rules)


def test_broken_y_check_is_refused(tmp_path):
    lines = _encode(KNOWN, 400, 5, False)
    # change the check value at the start of line 2 (digits after its X value)
    x, rest = lines[1][:3], lines[1][3:]
    lines[1] = x + _sqz(KNOWN[5] + 1) + rest[len(_sqz(KNOWN[5])):]
    with pytest.raises(FormatError, match=r"row 13: Y check value 16 does not repeat .* 15"):
        read_jcamp(_write(tmp_path, _jcamp(lines, n=len(KNOWN))))


def test_npoints_and_x_checks(tmp_path):
    lines = _encode(KNOWN, 400, 50, False)
    with pytest.raises(FormatError, match=r"NPOINTS=21 but 20 values"):
        read_jcamp(_write(tmp_path, _jcamp(lines, n=21, last_x=420)))
    with pytest.raises(FormatError, match=r"more than NPOINTS=19"):
        read_jcamp(_write(tmp_path, _jcamp(lines, n=19, last_x=418)))
    shifted = _encode(KNOWN, 401, 5, False)
    with pytest.raises(FormatError, match=r"X value 401 but point 1 should be at 400"):
        read_jcamp(_write(tmp_path, _jcamp(shifted, n=len(KNOWN))))


def test_affn_with_factors_and_firsty(tmp_path):
    lines = ["1000 100 200 300  $$ comment", "1003 400,500"]
    text = _jcamp(lines, n=5, first_x=1000, yfactor=0.002, xunits="1/CM",
                  extra="##FIRSTY=0.2")
    s = read_spectra(_write(tmp_path, text, "affn.dx"))
    # YFACTOR × integers (McDonald & Wilks 1988)
    np.testing.assert_allclose(s.values[0], [0.2, 0.4, 0.6, 0.8, 1.0])
    assert s.axis_unit == "cm-1"
    with pytest.raises(FormatError, match=r"FIRSTY=0\.3 but the first value decodes to 0\.2"):
        read_jcamp(_write(tmp_path, text.replace("##FIRSTY=0.2", "##FIRSTY=0.3")))


def test_xypoints_with_descending_axis_and_exponents(tmp_path):
    text = "\n".join([
        "##TITLE=std A", "##JCAMP-DX=5.01", "##XUNITS=MICROMETERS", "##YUNITS=ABSORBANCE",
        "##NPOINTS=3", "##XYPOINTS=(XY..XY)", "0.6, 1.5E-01; 0.5, 2.5E-01", "0.4, 0.35",
        "##END=",
    ])
    s = read_jcamp(_write(tmp_path, text))
    np.testing.assert_allclose(s.axis, [0.4, 0.5, 0.6])
    np.testing.assert_allclose(s.values[0], [0.35, 0.25, 0.15])
    assert s.axis_unit == "um"


@pytest.mark.parametrize(("yunits", "ys", "quantity"), [
    ("TRANSMITTANCE", [500, 250, 125], "transmittance"),
    ("TRANSMITTANCE", [50000, 25000, 12500], "percent_transmittance"),
    ("% TRANSMITTANCE", [500, 250, 125], "percent_transmittance"),
])
def test_transmittance_fraction_or_percent(tmp_path, yunits, ys, quantity):
    lines = [f"400 {ys[0]} {ys[1]} {ys[2]}"]
    s = read_jcamp(_write(tmp_path, _jcamp(lines, n=3, yunits=yunits)))
    assert s.quantity == quantity


def test_link_file_with_two_blocks(tmp_path):
    one = _jcamp(["400 1 2 3"], n=3, title="std 1")
    two = _jcamp(["400 4 5 6"], n=3, title="std 2")
    link = "##TITLE=series\n##JCAMP-DX=5.01\n##DATA TYPE=LINK\n##BLOCKS=2\n" + one + two
    s = read_jcamp(_write(tmp_path, link + "##END=\n"))
    assert s.sample_ids == ("std 1", "std 2")
    np.testing.assert_allclose(s.values, [[0.001, 0.002, 0.003], [0.004, 0.005, 0.006]])
    other = _jcamp(["410 4 5 6"], n=3, first_x=410, title="std 3")
    with pytest.raises(FormatError, match=r"block 'std 3' .* does not match block 'std 1'"):
        read_jcamp(_write(tmp_path, one + other))


@pytest.mark.parametrize(("change", "message"), [
    (lambda t: t.replace("##END=\n", ""), "has no ##END="),
    (lambda t: t.replace("##XUNITS=NANOMETERS", "##XUNITS=HZ"), "XUNITS='HZ' is not supported"),
    (lambda t: t.replace("##YUNITS=ABSORBANCE", "##YUNITS=COUNTS"), "YUNITS='COUNTS'"),
    (lambda t: t.replace("##JCAMP-DX=4.24", "##JCAMP-DX=6.00"), "versions 4.x and 5.x"),
    (lambda t: t.replace("##YFACTOR=0.001\n", ""), "lacks ##YFACTOR="),
    (lambda t: t.replace("(X++(Y..Y))", "(X++(R..R))"), r"only \(X\+\+\(Y\.\.Y\)\) is read"),
    (lambda t: t.replace("400 1 2 3", "400 1 ? 3"), r"'\?' .*not supported"),
    (lambda t: t.replace("##NPOINTS=3", "##PEAK TABLE=(XY..XY)"), "PEAK TABLE= is not supported"),
    (lambda t: "junk\n" + t, "text before the first ##TITLE="),
])
def test_refusals_name_what_and_where(tmp_path, change, message):
    text = change(_jcamp(["400 1 2 3"], n=3))
    with pytest.raises(FormatError, match=message):
        read_jcamp(_write(tmp_path, text))


def test_option_conflicting_with_header_is_refused(tmp_path):
    path = _write(tmp_path, _jcamp(["400 1 2 3"], n=3))
    with pytest.raises(FormatError, match=r"declares axis unit 'nm' but 'cm-1'"):
        read_jcamp(path, axis_unit="cm-1")
