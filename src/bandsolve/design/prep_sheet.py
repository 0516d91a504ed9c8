"""Preparation sheet (stock volumes per mixture, C₁V₁ = C₂V₂) and the plan/sheet writers."""

from __future__ import annotations

import html
import math
import os
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from bandsolve.cautions import SHORT_CAUTION
from bandsolve.design.amounts import Amount, concentration_factor
from bandsolve.design.pipettes import Pipette, deliverable_volumes
from bandsolve.design.plan import CalibrationPlan
from bandsolve.errors import DataError, where
from bandsolve.io.atomic import atomic_write

__all__ = [
    "PipetteFlag",
    "PreparationSheet",
    "preparation_html",
    "preparation_sheet",
    "write_plan_files",
    "write_preparation_csv",
]

DEFAULT_MIN_PIPETTE_ML = 0.1  # smallest volume delivered with ~1 % accuracy; common practice
VOLUME_FIGURES = 4  # written volumes: finer than pipettes deliver; common practice
SAFETY_NOTE = "Check this plan before use. " + SHORT_CAUTION


@dataclass(frozen=True)
class PipetteFlag:
    """A stock volume below the smallest volume that can be pipetted accurately.

    Attributes
    ----------
    sample : str
        Sample id of the mixture.
    analyte : str
        Analyte whose stock volume is too small.
    volume_ml : float
        Stock volume the sheet asks for (mL).
    dilution : int
        Suggested dilution factor of the stock (10 means "dilute stock 1:10").
    message : str
        The advice in words.
    """

    sample: str
    analyte: str
    volume_ml: float
    dilution: int
    message: str


@dataclass(frozen=True)
class PreparationSheet:
    """How to make up every mixture of a calibration plan from stock solutions.

    Attributes
    ----------
    concentrations : DataFrame
        Target concentrations (the plan's table), indexed by sample id.
    stocks : tuple of Amount
        Stock solution of each analyte, in the plan's analyte order.
    volumes_ml : DataFrame
        Volume of each stock (columns ``"<name> stock [mL]"``) and of solvent
        (``"solvent [mL]"``) per mixture; each row sums to ``final_volume_ml``.
    final_volume_ml : float
        Volume of each mixture after making up to the mark (mL).
    min_pipette_ml : float
        Smallest volume considered accurate to pipette (mL).
    flags : tuple of PipetteFlag
        Stock volumes below ``min_pipette_ml``, with a suggested intermediate dilution.
    pipettes : tuple of Pipette
        The pipettes the volumes were rounded to (empty: volumes exact).
    prepared : DataFrame
        Concentrations the rounded volumes actually give (``C_stock·V_stock/V_final``), same
        shape as ``concentrations``; equal to the targets when no pipettes were named.
    """

    concentrations: pd.DataFrame
    stocks: tuple[Amount, ...]
    volumes_ml: pd.DataFrame
    final_volume_ml: float
    min_pipette_ml: float
    flags: tuple[PipetteFlag, ...]
    pipettes: tuple[Pipette, ...] = ()
    prepared: pd.DataFrame | None = None

    def prepared_concentrations(self) -> pd.DataFrame:
        """The concentrations to give ``bandsolve build`` for these mixtures (the prepared
        ones when volumes were rounded to pipettes, else the targets)."""
        return self.concentrations if self.prepared is None else self.prepared

    def to_frame(self, significant_figures: int | None = None) -> pd.DataFrame:
        """Targets, volumes and a ``notes`` column (pipetting advice) per mixture.

        Parameters
        ----------
        significant_figures : int, optional
            Round the volumes (not the targets) to this many significant figures, as they
            would be read off a pipette; ``volumes_ml`` itself keeps the exact values.
        """
        notes = {s: "; ".join(f.message for f in self.flags if f.sample == s)
                 for s in self.volumes_ml.index}
        volumes = self.volumes_ml
        if significant_figures is not None:
            volumes = volumes.map(lambda v: float(f"{v:.{significant_figures}g}"))
        frame = pd.concat([self.concentrations, volumes], axis=1)
        frame["notes"] = pd.Series(notes)
        return frame

    def summary(self) -> str:
        """Short account of the sheet: stocks, volumes and flags."""
        lines = [
            f"Final volume per mixture: {self.final_volume_ml:g} mL; "
            f"smallest pipetted volume: {self.min_pipette_ml:g} mL",
            "Stocks: " + "; ".join(f"{s.name} {s.value:g} {s.unit}" for s in self.stocks),
            f"Volumes below the pipetting minimum: {len(self.flags)}",
        ]
        lines += [f"  {f.sample}: {f.message}" for f in self.flags]
        if self.pipettes and self.prepared is not None:
            target = self.concentrations.to_numpy()
            change = np.abs(self.prepared.to_numpy() - target)
            rel = np.divide(change, target, out=np.zeros_like(change), where=target > 0)
            i, k = np.unravel_index(int(np.argmax(rel)), rel.shape)
            lines += [
                "Volumes rounded to what these pipettes deliver: "
                + "; ".join(p.text for p in self.pipettes),
                f"Prepared concentrations differ from the targets by at most {100 * rel[i, k]:.2g} "
                f"% ({self.concentrations.index[i]}, {self.concentrations.columns[k]}); the "
                "plan files hold the prepared concentrations, recomputed as "
                "C_stock × V_stock / V_final.",
            ]
        return "\n".join(lines)


def _pipette_flag(sample: str, stock: Amount, volume: float, minimum: float,
                  final_volume: float) -> PipetteFlag:
    # Smallest power-of-ten dilution that brings the volume up to the minimum.
    dilution = 10 ** max(1, math.ceil(math.log10(minimum / volume) - 1e-9))
    message = (
        f"{volume:.3g} mL of {stock.name} stock is below the {minimum:g} mL pipetting minimum: "
        f"dilute stock 1:{dilution} (to {stock.value / dilution:g} {stock.unit}) and pipette "
        f"{volume * dilution:.3g} mL, or make at least "
        f"{final_volume * minimum / volume:.3g} mL of this mixture"
    )
    return PipetteFlag(sample, stock.name, volume, dilution, message)


def preparation_sheet(
    plan: CalibrationPlan,
    stocks: Mapping[str, tuple[float, str] | Amount],
    final_volume_ml: float,
    min_pipette_ml: float = DEFAULT_MIN_PIPETTE_ML,
    pipettes: Sequence[Pipette] = (),
) -> PreparationSheet:
    """Volumes of stock solutions and solvent that make up every mixture of a plan.

    Each stock volume follows from ``C₁V₁ = C₂V₂``: ``V_stock = c_target · V_final / C_stock``
    (after converting the target into the stock's unit); solvent makes up the rest.

    Parameters
    ----------
    plan : CalibrationPlan
        The mixtures to prepare.
    stocks : mapping of analyte name to (concentration, unit) or Amount
        One stock solution per analyte. Units must be of the same kind as the analyte's
        (mg/L with g/L or µg/mL; mol/L with mmol/L or µmol/L...).
    final_volume_ml : float
        Volume of each mixture (mL), e.g. a 50 mL volumetric flask.
    min_pipette_ml : float, default 0.1
        Smallest stock volume (mL) considered accurate to pipette; smaller nonzero volumes are
        flagged with a suggested intermediate dilution of the stock. With ``pipettes`` it is
        the smallest volume the smallest pipette delivers.
    pipettes : sequence of Pipette, optional
        The laboratory's pipettes (:func:`bandsolve.design.pipettes.parse_pipette`): each
        stock volume is rounded to the nearest volume one of them delivers and the prepared
        concentrations are recomputed from the rounded volumes (``C₂ = C₁V₁/V₂``).

    Returns
    -------
    PreparationSheet

    Raises
    ------
    DataError
        If a stock is missing, extra, or in a unit that cannot be converted, or if a mixture
        needs more stock solution than its final volume.
    """
    if not final_volume_ml > 0 or not min_pipette_ml >= 0:
        raise DataError(f"final volume ({final_volume_ml} mL) must be positive and the "
                        f"pipetting minimum ({min_pipette_ml} mL) not negative")
    names = [a.name for a in plan.analytes]
    missing = [n for n in names if n not in stocks]
    extra = [n for n in stocks if n not in names]
    if missing or extra:
        raise DataError(f"stocks do not match the analytes {names}: missing {missing}, "
                        f"unknown {extra}; give one stock per analyte, e.g. 'dye A=1000 mg/L'")
    amounts = tuple(s if isinstance(s, Amount) else Amount(n, float(s[0]), s[1])
                    for n, s in ((n, stocks[n]) for n in names))
    for stock in amounts:
        if not stock.value > 0:
            raise DataError(f"stock of {stock.name!r} has concentration {stock.value}; "
                            "give a positive concentration")
    factors = np.array([concentration_factor(a.unit, s.unit, f"stock of {a.name!r}: ")
                        for a, s in zip(plan.analytes, amounts, strict=True)])
    stock_conc = np.array([s.value for s in amounts])
    targets = plan.concentrations.to_numpy()
    volumes = targets * factors * final_volume_ml / stock_conc
    total = volumes.sum(axis=1)
    over = np.flatnonzero(total > final_volume_ml * (1 + 1e-12))
    if over.size:
        i = over[0]
        raise DataError(
            f"{where(sample=plan.concentrations.index[i])}needs {total[i]:.4g} mL of stock "
            f"solutions for a {final_volume_ml:g} mL mixture ({over.size} mixture(s) affected); "
            f"use stocks at least {total.max() / final_volume_ml:.3g} times more concentrated "
            "or lower the top of the ranges (a larger final volume does not help: each stock "
            "is the same fraction of any volume)"
        )
    prepared = None
    if pipettes:
        min_pipette_ml = min(p.low_ml for p in pipettes)
        rounded = deliverable_volumes(volumes, pipettes)
        volumes = np.where(np.isnan(rounded), volumes, rounded)  # undeliverable: flagged below
        prepared = pd.DataFrame(volumes * stock_conc / (factors * final_volume_ml),
                                index=plan.concentrations.index,
                                columns=plan.concentrations.columns)
        total = volumes.sum(axis=1)
    solvent = np.maximum(final_volume_ml - total, 0.0)
    table = pd.DataFrame(volumes, index=plan.concentrations.index,
                         columns=[f"{n} stock [mL]" for n in names])
    table["solvent [mL]"] = solvent
    flags = tuple(
        _pipette_flag(sample, stock, volumes[i, k], min_pipette_ml, final_volume_ml)
        for i, sample in enumerate(table.index)
        for k, stock in enumerate(amounts)
        if 0 < volumes[i, k] < min_pipette_ml
    )
    return PreparationSheet(plan.concentrations.copy(), amounts, table, float(final_volume_ml),
                            float(min_pipette_ml), flags, tuple(pipettes), prepared)


_FLOAT = "%.10g"  # ten significant figures: exact for prepared values, free of binary noise


def _write_atomic(path: str | os.PathLike[str], text: str) -> None:
    with atomic_write(path, newline="") as handle:
        handle.write(text)


def write_plan_files(plan: CalibrationPlan, path: str | os.PathLike[str],
                     sheet: PreparationSheet | None = None) -> list[Path]:
    """Write the calibration and the validation mixtures as two concentration tables.

    ``PLAN.csv`` gives ``PLAN-calibration.csv`` and (with validation mixtures)
    ``PLAN-validation.csv``: ``sample`` + one column per analyte, exactly what ``bandsolve
    build --concentrations`` and ``bandsolve assess --concentrations`` read, so they are used
    as written. With a preparation sheet whose volumes were rounded to pipettes, the tables
    hold the prepared concentrations.

    Returns
    -------
    list of Path
        The files written.
    """
    path = Path(path)
    table = plan.concentrations if sheet is None else sheet.prepared_concentrations()
    is_cal = np.asarray(plan.is_calibration)
    written = []
    for role, rows in (("calibration", is_cal), ("validation", ~is_cal)):
        if rows.any():
            target = path.with_name(f"{path.stem}-{role}.csv")
            _write_atomic(target, table[rows].to_csv(float_format=_FLOAT))
            written.append(target)
    return written


def write_preparation_csv(sheet: PreparationSheet, path: str | os.PathLike[str],
                          significant_figures: int = VOLUME_FIGURES) -> None:
    """Write the preparation sheet (targets, volumes in mL, notes) as CSV.

    Volumes are written to ``significant_figures`` significant figures (default 4, e.g.
    0.08783 mL, 49.56 mL): finer than any pipette or flask delivers, so the rows may differ
    from the final volume in the last digit. ``sheet.volumes_ml`` keeps the exact values.
    """
    frame = sheet.to_frame(significant_figures)
    _write_atomic(path, frame.to_csv(float_format=_FLOAT))


_CSS = """
body { font-family: sans-serif; font-size: 11pt; margin: 1.5em; }
.note { border: 2px solid #a33; padding: 0.5em; background: #fdf3f3; }
table { border-collapse: collapse; margin-top: 1em; }
th, td { border: 1px solid #888; padding: 0.25em 0.5em; text-align: right; }
th:first-child, td:first-child, td.notes { text-align: left; }
td.flag { background: #ffe9b3; font-weight: bold; }
@media print {
  @page { size: A4 landscape; margin: 12mm; }
  body { margin: 0; font-size: 9pt; }
  .note { background: none; }
  tr { page-break-inside: avoid; }
  thead { display: table-header-group; }
}
"""


def preparation_html(sheet: PreparationSheet) -> str:
    """Printable, self-contained HTML page of the preparation sheet.

    One table lists every mixture: target concentrations, stock volumes (mL, 4 significant
    figures, or as the named pipettes deliver them),
    solvent, notes and a box to tick when the mixture is made. Volumes below the pipetting
    minimum are highlighted. The page opens with a note that the plan must be checked, the
    method validated, and hazardous chemicals handled under local safety rules.
    """
    esc = html.escape
    flagged = {(f.sample, f.analyte) for f in sheet.flags}
    frame = sheet.to_frame()
    conc_cols = list(sheet.concentrations.columns)
    head = ["sample", *conc_cols, *sheet.volumes_ml.columns, "notes", "done"]
    rows = []
    for sample, row in frame.iterrows():
        cells = [f"<td>{esc(str(sample))}</td>"]
        cells += [f"<td>{row[c]:.4g}</td>" for c in conc_cols]
        for stock in sheet.stocks:
            cls = ' class="flag"' if (sample, stock.name) in flagged else ""
            cells.append(f"<td{cls}>{row[f'{stock.name} stock [mL]']:.4g}</td>")
        cells.append(f"<td>{row['solvent [mL]']:.4g}</td>")
        cells.append(f'<td class="notes">{esc(row["notes"])}</td><td>&#9744;</td>')
        rows.append("<tr>" + "".join(cells) + "</tr>")
    stocks = "".join(f"<li>{esc(s.name)}: {s.value:g} {esc(s.unit)}</li>" for s in sheet.stocks)
    return "\n".join([
        "<!DOCTYPE html>",
        '<html lang="en"><head><meta charset="utf-8">',
        "<title>Preparation sheet</title>",
        f"<style>{_CSS}</style></head><body>",
        f'<p class="note"><strong>{esc(SAFETY_NOTE)}</strong></p>',
        "<h1>Preparation sheet</h1>",
        f"<p>Each mixture: pipette the stock volumes into a {sheet.final_volume_ml:g} mL "
        f"volumetric flask and make up to the mark with solvent (the solvent column gives "
        f"the nominal volume). Smallest accurate pipetting volume: {sheet.min_pipette_ml:g} mL; "
        "highlighted volumes are below it (see notes).</p>",
        f"<h2>Stock solutions</h2><ul>{stocks}</ul>",
        "<table><thead><tr>" + "".join(f"<th>{esc(h)}</th>" for h in head) + "</tr></thead>",
        "<tbody>", *rows, "</tbody></table>",
        "</body></html>",
    ])
