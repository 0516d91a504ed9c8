"""A small strict reader of JCAMP-DX 4.24 and 5.01 UV-Vis/IR spectra.

Supported: ``##XYDATA=(X++(Y..Y))`` in AFFN, PAC or compressed ASDF (SQZ, DIF, DUP, with the
DIF Y check verified); ``##XYPOINTS=(XY..XY)``; ``##XFACTOR``, ``##YFACTOR``, ``##FIRSTX``,
``##LASTX``, ``##NPOINTS`` and ``##FIRSTY`` (all checked against the data); ``##XUNITS``
NANOMETERS, MICROMETERS or 1/CM; ``##YUNITS`` ABSORBANCE, TRANSMITTANCE or % TRANSMITTANCE;
``##PATHLENGTH`` (cm); ``##TITLE`` (the sample id); ``$$`` comments. A file with several blocks
(a LINK compound file, or several ``##TITLE=`` … ``##END=`` blocks) gives one spectrum per data
block; all must share one axis grid, unit and quantity. Peak tables, NTUPLES and missing
values (``?``) are refused with a clear message.

References
----------
McDonald, R. S. & Wilks, P. A. (1988). JCAMP-DX: a standard form for exchange of infrared
spectra in computer readable form. Applied Spectroscopy 42(1), 151-162.
Lampen, P., Lambert, J., Lancashire, R. J., et al. (1999). An extension to the JCAMP-DX
standard file format, JCAMP-DX V.5.01. Pure and Applied Chemistry 71(8), 1549-1556.
"""

from __future__ import annotations

import re
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from bandsolve.errors import FormatError, where
from bandsolve.io._build import Options, build, final_checks
from bandsolve.io._jcamp_data import Grid, decode_xydata, decode_xypoints
from bandsolve.io._source import read_text
from bandsolve.spectra import SpectralSet

__all__ = ["JCAMP_SUFFIXES", "read_jcamp", "read_jcamp_text"]

JCAMP_SUFFIXES = (".jdx", ".dx", ".jcm", ".jcamp")
_LDR = re.compile(r"^##([^=]*)=(.*)$")
_X_UNITS = {"NANOMETERS": "nm", "NM": "nm", "MICROMETERS": "um", "MICRONS": "um",
            "UM": "um", "1/CM": "cm-1", "CM-1": "cm-1", "CM^-1": "cm-1"}
_REFUSED = ("PEAKTABLE", "NTUPLES", "PEAKASSIGNMENTS", "XYPOINTSCOMPRESSED", "RADATA")
_MAX_POINTS = 10_000_000


@dataclass
class _Block:
    title: str
    line: int
    fields: dict[str, tuple[int, str]] = field(default_factory=dict)
    data: list[tuple[int, str]] = field(default_factory=list)
    last: str = "TITLE"


def read_jcamp(path: str | Path, *, axis_unit: str | None = None, quantity: str | None = None,
               path_length_cm: float | None = None, replicates: str = "error") -> SpectralSet:
    """Read a JCAMP-DX file (one or several spectra on one grid).

    Parameters
    ----------
    path : path-like
        ``.jdx``, ``.dx``, ``.jcm`` or ``.jcamp`` file.
    axis_unit, quantity, path_length_cm : optional
        When given they must agree with the file's ``##XUNITS``, ``##YUNITS`` and
        ``##PATHLENGTH``; a conflict is an error rather than a silent choice.
    replicates : {"error", "average"}
        What to do with blocks sharing a title.

    Returns
    -------
    SpectralSet
        Shape (number of data blocks, NPOINTS); sample ids from ``##TITLE``.

    Raises
    ------
    FormatError
        Naming the file, the line and what breaks the standard.
    """
    return read_jcamp_text(read_text(path), str(path), axis_unit=axis_unit, quantity=quantity,
                           path_length_cm=path_length_cm, replicates=replicates)


def read_jcamp_text(text: str, source: str = "<stdin>", *, axis_unit: str | None = None,
                    quantity: str | None = None, path_length_cm: float | None = None,
                    replicates: str = "error") -> SpectralSet:
    """Read JCAMP-DX content already in memory; see :func:`read_jcamp`."""
    asked = Options(axis_unit, quantity, path_length_cm, replicates)
    blocks = [b for b in _blocks(text, source) if b.data or "XYDATA" in b.fields
              or "XYPOINTS" in b.fields]
    if not blocks:
        raise FormatError(f"{where(source)}no ##XYDATA= or ##XYPOINTS= table found")
    spectra = [_spectrum(b, source) for b in blocks]
    first = spectra[0]
    for b, s in zip(blocks[1:], spectra[1:], strict=True):
        same = s.axis.shape == first.axis.shape and np.allclose(s.axis, first.axis, rtol=1e-9)
        if not same or (s.unit, s.quantity) != (first.unit, first.quantity):
            raise FormatError(
                f"{where(source, row=b.line)}block {b.title!r} ({s.axis.size} points, "
                f"{s.axis[0]:g}-{s.axis[-1]:g} {s.unit}, {s.quantity}) does not match block "
                f"{blocks[0].title!r} ({first.axis.size} points, {first.axis[0]:g}-"
                f"{first.axis[-1]:g} {first.unit}, {first.quantity}); save the spectra on one "
                "grid or read the blocks as separate files"
            )
    for label, want, got in (("axis unit", asked.axis_unit, first.unit),
                             ("quantity", asked.quantity, first.quantity),
                             ("path length", asked.path_length_cm, first.path_length_cm)):
        if want is not None and got is not None and want != got:
            raise FormatError(
                f"{where(source)}the file declares {label} {got!r} but {want!r} was asked for; "
                "leave the option out (the file's header is used) or fix the file"
            )
    options = Options(first.unit, first.quantity,
                      asked.path_length_cm or first.path_length_cm, replicates)
    stem = Path(source).stem
    ids = [b.title or stem for b in blocks]
    values = np.vstack([s.y for s in spectra])
    places = [f"block at line {b.line}" for b in blocks]
    return final_checks(build(first.axis, values, ids, places, options, source,
                              unit_from="argument" if asked.axis_unit else "file"))


def _label(raw: str) -> str:
    return re.sub(r"[\s\-/_]", "", raw).upper()


def _blocks(text: str, source: str) -> list[_Block]:
    """Split the file into blocks of labelled data records (LDRs), nested LINK blocks flat."""
    open_blocks: list[_Block] = []
    done: list[_Block] = []
    for number, raw in enumerate(text.splitlines(), start=1):
        line = raw.split("$$", 1)[0].strip()
        if not line:
            continue
        m = _LDR.match(line)
        if m is None:
            if not open_blocks:
                raise FormatError(f"{where(source, row=number)}text before the first ##TITLE=; "
                                  "a JCAMP-DX file starts with ##TITLE=")
            block = open_blocks[-1]
            if block.last in ("XYDATA", "XYPOINTS"):
                block.data.append((number, line))
            else:  # continuation of a long text value
                at, value = block.fields.get(block.last, (number, ""))
                block.fields[block.last] = (at, f"{value} {line}")
            continue
        label, value = _label(m.group(1)), m.group(2).strip()
        if label == "TITLE":
            open_blocks.append(_Block(value, number))
            continue
        if not open_blocks:
            raise FormatError(f"{where(source, row=number)}##{m.group(1)}= before the first "
                              "##TITLE=; a JCAMP-DX block starts with ##TITLE=")
        block = open_blocks[-1]
        if label == "END":
            done.append(open_blocks.pop())
            continue
        if label in _REFUSED:
            raise FormatError(f"{where(source, row=number)}##{m.group(1)}= is not supported; "
                              "export the spectrum as ##XYDATA=(X++(Y..Y)) or ##XYPOINTS=")
        if label in block.fields:
            raise FormatError(f"{where(source, row=number)}##{m.group(1)}= appears twice in "
                              f"block {block.title!r}; keep one")
        block.fields[label] = (number, value)
        block.last = label
    if open_blocks:
        b = open_blocks[-1]
        raise FormatError(f"{where(source, row=b.line)}block {b.title!r} has no ##END=; the file "
                          "is cut short or damaged")
    return done


@dataclass(frozen=True)
class _Spectrum:
    axis: np.ndarray
    y: np.ndarray
    unit: str
    quantity: str
    path_length_cm: float | None


def _number(block: _Block, label: str, source: str, default: float | None = None) -> float:
    if label not in block.fields:
        if default is not None:
            return default
        raise FormatError(f"{where(source, row=block.line)}block {block.title!r} lacks ##{label}=, "
                          "which its data table needs")
    line, text = block.fields[label]
    try:
        value = float(text)
    except ValueError:
        value = float("nan")
    if not np.isfinite(value) or (label.endswith("FACTOR") and value == 0):
        raise FormatError(f"{where(source, row=line)}##{label}={text!r} is not a valid number")
    return value


def _spectrum(block: _Block, source: str) -> _Spectrum:
    version = block.fields.get("JCAMPDX", (block.line, ""))[1]
    if not re.match(r"^\s*[45]\.", version):
        raise FormatError(f"{where(source, row=block.line)}block {block.title!r}: ##JCAMP-DX= "
                          f"{version!r}; only versions 4.x and 5.x are read")
    unit_text = block.fields.get("XUNITS", (block.line, ""))[1].strip().upper()
    if unit_text not in _X_UNITS:
        raise FormatError(f"{where(source, row=block.line)}##XUNITS={unit_text!r} is not "
                          "supported; use NANOMETERS, MICROMETERS or 1/CM")
    xfactor = _number(block, "XFACTOR", source, 1.0 if "XYPOINTS" in block.fields else None)
    yfactor = _number(block, "YFACTOR", source, 1.0 if "XYPOINTS" in block.fields else None)
    if "XYPOINTS" in block.fields:
        pairs = decode_xypoints(block.data, source)
        n_declared = _npoints(block, source, required=False)
        if n_declared is not None and n_declared != len(pairs):
            raise FormatError(f"{where(source, row=block.line)}NPOINTS={n_declared} but "
                              f"{len(pairs)} points in block {block.title!r}")
        if not len(pairs):
            raise FormatError(f"{where(source, row=block.line)}##XYPOINTS= table is empty")
        x, y = pairs[:, 0] * xfactor, pairs[:, 1] * yfactor
    else:
        form = re.sub(r"\s", "", block.fields["XYDATA"][1])
        if form != "(X++(Y..Y))":
            raise FormatError(f"{where(source, row=block.fields['XYDATA'][0])}##XYDATA={form} "
                              "is not supported; only (X++(Y..Y)) is read")
        grid = Grid(_number(block, "FIRSTX", source), _number(block, "LASTX", source),
                    _npoints(block, source, required=True), xfactor)
        y = decode_xydata(block.data, grid, source) * yfactor
        if y.size != grid.n:
            raise FormatError(f"{where(source, row=block.line)}NPOINTS={grid.n} but {y.size} "
                              f"values in block {block.title!r}; the data are cut short")
        x = np.linspace(grid.first, grid.last, grid.n)
        if "FIRSTY" in block.fields:
            first_y = _number(block, "FIRSTY", source)
            if abs(y[0] - first_y) > abs(yfactor) + 1e-6 * abs(first_y):
                raise FormatError(f"{where(source, row=block.fields['FIRSTY'][0])}FIRSTY="
                                  f"{first_y:g} but the first value decodes to {y[0]:g}")
    if x.size > 1 and x[0] > x[-1]:
        x, y = x[::-1], y[::-1]
    path = _number(block, "PATHLENGTH", source) if "PATHLENGTH" in block.fields else None
    return _Spectrum(x, y, _X_UNITS[unit_text], _quantity(block, y, source), path)


def _npoints(block: _Block, source: str, *, required: bool) -> int | None:
    if "NPOINTS" not in block.fields and not required:
        return None
    line, text = block.fields.get("NPOINTS", (block.line, ""))
    if not re.fullmatch(r"\s*\d+\s*", text) or not 0 < int(text) <= _MAX_POINTS:
        raise FormatError(f"{where(source, row=line)}##NPOINTS={text!r} must be a whole number "
                          f"from 1 to {_MAX_POINTS}")
    return int(text)


def _quantity(block: _Block, y: np.ndarray, source: str) -> str:
    text = block.fields.get("YUNITS", (block.line, ""))[1].strip().upper()
    if text in ("ABSORBANCE", "A", "AU"):
        return "absorbance"
    if "TRANSMITTANCE" in text:
        if "%" in text or "PERCENT" in text:
            return "percent_transmittance"
        # Plain TRANSMITTANCE is a fraction; values above 1.5 can only be percent.
        return "percent_transmittance" if np.max(y) > 1.5 else "transmittance"
    raise FormatError(f"{where(source, row=block.line)}##YUNITS={text!r} is not supported; use "
                      "ABSORBANCE, TRANSMITTANCE or % TRANSMITTANCE")
