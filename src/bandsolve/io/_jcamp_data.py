"""Decoding of JCAMP-DX ordinate tables: AFFN, PAC and the ASDF compression (SQZ, DIF, DUP).

References
----------
McDonald, R. S. & Wilks, P. A. (1988). JCAMP-DX: a standard form for exchange of infrared
spectra in computer readable form. Applied Spectroscopy 42(1), 151-162.
"""

from __future__ import annotations

import re
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from bandsolve.errors import FormatError, where

# SQZ: absolute value whose first digit carries the sign; DIF: difference to the previous
# value; DUP: total number of occurrences of the previous token (McDonald & Wilks 1988).
_SQZ = {"@": 0, **{c: k + 1 for k, c in enumerate("ABCDEFGHI")},
        **{c: -(k + 1) for k, c in enumerate("abcdefghi")}}
_DIF = {"%": 0, **{c: k + 1 for k, c in enumerate("JKLMNOPQR")},
        **{c: -(k + 1) for k, c in enumerate("jklmnopqr")}}
_DUP = {**{c: k + 1 for k, c in enumerate("STUVWXYZ")}, "s": 9}

# An AFFN exponent needs its sign ("1.5E+03"), because a bare E is the SQZ digit +5.
_TOKEN = re.compile(r"""
    (?P<affn>[+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]\d+)?)
  | (?P<sqz>[@A-Ia-i][\d.]*)
  | (?P<dif>[%J-Rj-r][\d.]*)
  | (?P<dup>[S-Zs]\d*)
  | (?P<sep>[\s,;]+)
  | (?P<bad>.)
""", re.VERBOSE)


@dataclass(frozen=True)
class Grid:
    """The X axis announced by the header: ``first``, ``last`` (real units), ``n`` points."""

    first: float
    last: float
    n: int
    xfactor: float

    @property
    def step(self) -> float:
        return (self.last - self.first) / (self.n - 1) if self.n > 1 else 0.0


def _tokens(text: str, line: int, source: str) -> list[tuple[str, float]]:
    out = []
    for m in _TOKEN.finditer(text):
        kind, s = m.lastgroup, m.group()
        if kind == "sep":
            continue
        if kind == "bad":
            raise FormatError(
                f"{where(source, row=line)}character {s!r} is neither a number nor an ASDF "
                "compression character; missing values ('?') and other marks are not supported"
            )
        try:
            if kind == "affn":
                value = float(s)
            elif kind == "dup":
                value = float(_DUP[s[0]] * 10 ** (len(s) - 1) + (int(s[1:]) if s[1:] else 0))
            else:
                digit = (_SQZ if kind == "sqz" else _DIF)[s[0]]
                value = float(f"{abs(digit)}{s[1:]}") * (-1 if digit < 0 else 1)
        except ValueError:
            raise FormatError(f"{where(source, row=line)}{s!r} is not a valid number") from None
        out.append((kind, value))
    return out


def decode_xydata(lines: Sequence[tuple[int, str]], grid: Grid, source: str) -> np.ndarray:
    """Ordinates of an ``##XYDATA=(X++(Y..Y))`` table, in file units (before YFACTOR).

    Every line starts with its X value (checked against FIRSTX + k·step). When a line ends in
    DIF form, the next line repeats that last ordinate first (the Y check value); it is
    compared and dropped, and a mismatch is an error.
    """
    ys: list[float] = []
    after_dif = False
    previous_line = None
    tol = max(0.5 * abs(grid.step), 1e-9 * max(abs(grid.first), abs(grid.last), 1.0))
    for number, text in lines:
        tokens = _tokens(text, number, source)
        if not tokens:
            continue
        (xkind, x), rest = tokens[0], tokens[1:]
        if xkind not in ("affn", "sqz") or not rest:
            raise FormatError(
                f"{where(source, row=number)}an ##XYDATA line needs an X value followed by Y "
                "values"
            )
        start = len(ys)
        if after_dif:
            kind, check = rest[0]
            if kind not in ("affn", "sqz") or not np.isclose(check, ys[-1], rtol=1e-9, atol=1e-9):
                raise FormatError(
                    f"{where(source, row=number)}Y check value {check:g} does not repeat the last "
                    f"value {ys[-1]:g} of line {previous_line}; the compressed data are damaged "
                    "or a line is missing"
                )
            rest, start = rest[1:], start - 1
        expected = grid.first + start * grid.step
        if abs(x * grid.xfactor - expected) > tol:
            raise FormatError(
                f"{where(source, row=number)}X value {x * grid.xfactor:g} but point {start + 1} "
                f"should be at {expected:g} (FIRSTX, LASTX, NPOINTS); the header does not match "
                "the data or a line is missing"
            )
        after_dif = _expand(rest, ys, grid.n, number, source, after_dif)
        previous_line = number
    return np.array(ys)


def _expand(tokens: Sequence[tuple[str, float]], ys: list[float], limit: int, line: int,
            source: str, after_dif: bool) -> bool:
    """Append the ordinates of one line to ``ys``; return whether the line ended in DIF form."""
    # After a dropped Y check value the last value stands as an absolute one.
    mode, diff = ("abs" if after_dif else None), 0.0
    for kind, value in tokens:
        if kind in ("affn", "sqz"):
            ys.append(value)
            mode = "abs"
        elif kind == "dif":
            if not ys:
                raise FormatError(f"{where(source, row=line)}a DIF value has no value before it")
            ys.append(ys[-1] + value)
            mode, diff = "dif", value
        else:
            count = int(value)
            if mode not in ("abs", "dif") or count < 1 or len(ys) + count - 1 > limit:
                raise FormatError(
                    f"{where(source, row=line)}a DUP count {count} that does not follow a value "
                    "or runs past NPOINTS"
                )
            for _ in range(count - 1):
                ys.append(ys[-1] + (diff if mode == "dif" else 0.0))
            mode = mode + "-dup"
        if len(ys) > limit:
            raise FormatError(
                f"{where(source, row=line)}more than NPOINTS={limit} values; correct NPOINTS or "
                "the data"
            )
    return mode in ("dif", "dif-dup")


def decode_xypoints(lines: Sequence[tuple[int, str]], source: str) -> np.ndarray:
    """``##XYPOINTS=(XY..XY)`` pairs as an array of shape (k, 2), in file units."""
    numbers: list[float] = []
    for number, text in lines:
        for kind, value in _tokens(text, number, source):
            if kind != "affn":
                raise FormatError(
                    f"{where(source, row=number)}##XYPOINTS values must be plain numbers (AFFN)"
                )
            numbers.append(value)
    if len(numbers) % 2:
        raise FormatError(f"{where(source)}##XYPOINTS holds an odd count of numbers; every X "
                          "needs its Y")
    return np.array(numbers, dtype=float).reshape(-1, 2)
