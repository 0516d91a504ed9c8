"""The HTML report: every section, valid inline PNG figures, no network references, units on
every figure, the command line, and a headless-browser rendering when Chromium is present."""

from __future__ import annotations

import argparse
import base64
import re
import struct
import subprocess
import zlib
from html import escape as html_escape
from html.parser import HTMLParser

import numpy as np
import pandas as pd
import pytest

from bandsolve.batch.predict import predict_inputs
from bandsolve.calibration.build import build_cls
from bandsolve.calibration.build_pls import build_pls
from bandsolve.cli.demo_data import DEMO_LABEL, write_demo_data
from bandsolve.flags import FLAG_CODES
from bandsolve.io import read_concentrations, read_spectra
from bandsolve.report import SECTION_IDS, _sections, render_report, write_report
from bandsolve.report import _views as V
from tests.report_scenarios import chromium, printed_text

PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"


class _Collector(HTMLParser):
    """Section ids, image sources and every attribute value of a page."""

    def __init__(self):
        super().__init__()
        self.section_ids: list[str] = []
        self.images: list[str] = []
        self.attributes: list[tuple[str, str, str]] = []
        self.tags: set[str] = set()

    def handle_starttag(self, tag, attrs):
        self.tags.add(tag)
        for name, value in attrs:
            self.attributes.append((tag, name, value or ""))
        if tag == "section":
            self.section_ids.append(dict(attrs).get("id", ""))
        if tag == "img":
            self.images.append(dict(attrs)["src"])


def _parse(text: str) -> _Collector:
    c = _Collector()
    c.feed(text)
    return c


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    folder = tmp_path_factory.mktemp("demo")
    files = write_demo_data(folder)
    data = {
        "cal": (read_spectra(files.calibration_spectra),
                read_concentrations(files.calibration_concentrations)),
        "val": (read_spectra(files.validation_spectra),
                read_concentrations(files.validation_concentrations)),
        "blanks": read_spectra(files.blanks),
        "files": files,
    }
    data["cls"] = build_cls(*data["cal"], provenance={"data_label": DEMO_LABEL})
    data["pls"] = build_pls(*data["cal"], cv="interleaved:5", max_components=6)
    data["batch"] = predict_inputs(data["cls"], [str(p) for p in files.routine])
    return data


@pytest.fixture(scope="module")
def full_report(demo, tmp_path_factory):
    path = tmp_path_factory.mktemp("report") / "cls report.html"
    calls = []
    written = write_report(demo["cls"], path, calibration_spectra=demo["cal"][0],
                           calibration_table=demo["cal"][1], validation_spectra=demo["val"][0],
                           validation_table=demo["val"][1], blanks=demo["blanks"],
                           batch=demo["batch"], progress=lambda *a: calls.append(a))
    return written, path.read_text(encoding="utf-8"), calls


@pytest.mark.slow
def test_every_section_is_present_once(full_report):
    _, text, _ = full_report
    ids = _parse(text).section_ids
    for sid, _ in SECTION_IDS:
        assert ids.count(sid) == 1, sid
    assert "data-label" in ids  # the model's provenance carries the invented-data label
    assert DEMO_LABEL in text


def _png_header(data: bytes) -> tuple[int, int]:
    # PNG specification (W3C / ISO/IEC 15948:2004): 8-byte signature, then the IHDR chunk:
    # length (13), type, width and height as big-endian uint32, ..., CRC-32 over type+data.
    assert data[:8] == PNG_SIGNATURE
    length, kind = struct.unpack(">I4s", data[8:16])
    assert (length, kind) == (13, b"IHDR")
    width, height = struct.unpack(">II", data[16:24])
    (crc,) = struct.unpack(">I", data[29:33])
    assert crc == zlib.crc32(data[12:29])
    return width, height


def test_every_image_is_an_inline_valid_png(full_report):
    _, text, _ = full_report
    sources = _parse(text).images
    assert len(sources) >= 8
    sizes = []
    for src in sources:
        assert src.startswith("data:image/png;base64,")
        data = base64.b64decode(src.split(",", 1)[1], validate=True)
        sizes.append(_png_header(data))
        assert data[-12:] == b"\x00\x00\x00\x00IEND\xaeB`\x82"  # IEND chunk closes the file
    # Component figure: 7 × 4 in at 110 dpi = 770 × 440 pixels (size × resolution).
    assert (770, 440) in sizes


def test_no_reference_leaves_the_file(full_report):
    _, text, _ = full_report
    page = _parse(text)
    url = re.compile(r"^\s*(?:[a-z][a-z0-9+.-]*:)?//", re.IGNORECASE)
    for tag, name, value in page.attributes:
        assert not url.match(value), (tag, name, value[:80])
        if name in ("src", "href", "action", "poster", "srcset"):
            assert value.startswith(("data:", "#")), (tag, name, value[:80])
    assert not page.tags & {"script", "link", "iframe", "object", "embed"}
    styles = "".join(re.findall(r"<style>(.*?)</style>", text, re.S))
    assert "url(" not in styles and "@import" not in styles and "@font-face" not in styles
    assert "@media print" in styles and "break-before:page" in styles


def test_flags_legend_cautions_and_merit(full_report):
    _, text, _ = full_report
    for code in FLAG_CODES:
        assert f"<dt>{code}</dt>" in text
    assert "validated for its intended use" in text and "dichromate" in text
    # Figures of merit were computed from the blanks: the summary header names LOD.
    assert "LOD [mg/L]" in text and "replicate blank spectra" in text


def test_progress_reaches_the_total_once(full_report):
    _, _, calls = full_report
    totals = {c[1] for c in calls}
    assert len(totals) == 1 and [c[0] for c in calls] == list(range(1, calls[0][1] + 1))


def test_written_atomically_with_no_leftovers(full_report):
    written, _, _ = full_report
    assert written.is_file()
    assert [p.name for p in written.parent.iterdir()] == [written.name]


@pytest.mark.slow
def test_model_alone_says_what_is_missing(demo):
    text = render_report(demo["pls"])
    ids = _parse(text).section_ids
    assert [sid for sid, _ in SECTION_IDS] == [i for i in ids if i != "data-label"]
    assert "data-label" not in ids  # no invented-data label in this model's provenance
    # Every model stores figures of merit at build time (σx from residuals without blanks).
    assert "Figures of merit stored with the model." in text
    assert "No validation results are included" in text
    assert "No prediction batch" in text
    assert "randomization rule" in text  # the component rule is stated


class _Result:
    """Stand-in with the interface the report expects of assessment/comparison objects."""

    def __init__(self, word):
        self.word = word

    def summary(self) -> str:
        return f"summary of the {self.word}"

    def to_frame(self) -> pd.DataFrame:
        return pd.DataFrame({"RMSEP": [0.125]}, index=[self.word])


@pytest.mark.slow
def test_assessment_and_comparison_objects_are_rendered(demo):
    text = render_report(demo["cls"], assessment=_Result("assessment"),
                         comparison=_Result("comparison"))
    for word in ("assessment", "comparison"):
        assert f"summary of the {word}" in text and "0.125" in text


def _figure_items(demo, method):
    cal = demo[method]
    cal_set = V.sample_set(cal, "calibration", *demo["cal"])
    items = [V.component_figure(cal), V.nas_figure(cal, None), V.overlay_figure(cal, cal_set),
             *V.rmsecv_figures(cal), *V.assessment_figures(cal, cal_set, None),
             V.outlier_figure(cal, [("calibration", list(cal_set.sample_ids),
                                     *V.set_ratios(cal, cal_set))], "validation")]
    if method == "cls":
        items.append(V.batch_view(cal, demo["batch"].table))
    return items


@pytest.mark.parametrize("method", ["cls", "pls"])
def test_report_figures_label_both_axes_with_units(demo, method):
    for item in _figure_items(demo, method):
        for ax in item.figure.axes:
            if not ax.get_visible():
                continue
            labels = [ax.get_ylabel()] + ([ax.get_xlabel()] if ax.get_xlabel() else [])
            for label in labels:
                counts = label in ("sample", "number of PLS components")  # no unit to give
                assert counts or re.search(r"\[[^\]]+\]", label), (item.key, label)


def test_cls_net_analyte_signal_is_orthogonal_to_the_other_pure_spectra(demo):
    # Lorber 1986: s*_k is orthogonal to every other column of S; SEL = ‖s*_k‖/‖s_k‖ ≤ 1.
    cal = demo["cls"]
    nas, sel = V.net_signal(cal, None)
    K = cal.estimators[0].component_spectra()
    for k in range(len(K)):
        others = np.delete(K, k, axis=0)
        np.testing.assert_allclose(others @ nas[k], 0.0, atol=1e-12)
        np.testing.assert_allclose(sel[k], np.linalg.norm(nas[k]) / np.linalg.norm(K[k]))


@pytest.mark.slow
def test_cli_writes_the_report(demo, tmp_path):
    from bandsolve.cli import report_cmd

    parser = argparse.ArgumentParser()
    report_cmd.register(parser.add_subparsers())
    files = demo["files"]
    model = tmp_path / "m.bsm"
    from bandsolve.calibration.modelfile import save_model

    save_model(demo["cls"], model)
    out = tmp_path / "r.html"
    args = parser.parse_args([
        "report", str(model), "--batch", str(files.routine[1]),
        "--quiet", "--out", str(out)])
    assert args.func(args) == 0
    text = out.read_text(encoding="utf-8")
    assert "batch-2-05" in text and 'id="fig-batch"' in text


def _section(text: str, sid: str) -> str:
    return re.search(rf'<section id="{sid}">(.*?)</section>', text, re.S).group(1)


def test_summaries_wrap_and_aligned_columns_become_tables():
    # Preformatted text must wrap instead of running past an A4 page (common practice).
    styles = _sections.STYLE
    pre_rules = re.findall(r"(?:^|\n)\s*pre\s*\{([^}]*)\}", styles)
    assert len(pre_rules) == 2  # the screen rule and the print rule
    for rule in pre_rules:
        assert "white-space:pre-wrap" in rule and "overflow-wrap:anywhere" in rule
    assert "overflow-x" not in styles
    text = ("Title line\nname     A [u]   B [-]\ndye A    0.5      1\ndye B    2        -\n"
            "  indented  detail  line  here\nσx from: blanks")
    html = _sections.summary_html(text)
    assert html.count("<th>") == 3 and "<th>A [u]</th>" in html and "<td>dye B</td>" in html
    assert "<pre class=\"summary\">Title line</pre>" in html
    assert "  indented  detail  line  here\nσx from: blanks</pre>" in html


def test_frame_table_hides_a_plain_row_count_and_shows_missing_as_a_dash():
    frame = pd.DataFrame({"method": ["CLS", "PLS"], "RMSEP": [None, 0.25]})
    html = _sections.frame_table(frame)
    heads = re.findall(r"<th>(.*?)</th>", html)
    assert heads == ["method", "RMSEP"]  # no unnamed index column
    assert "None" not in html and re.findall(r"<td>(.*?)</td>", html) == ["CLS", "–", "PLS",
                                                                          "0.25"]
    named = _sections.frame_table(frame.set_index("method"))
    assert re.findall(r"<th>(.*?)</th>", named) == ["method", "RMSEP"]


@pytest.fixture(scope="module")
def printed_report(demo, tmp_path_factory):
    from bandsolve.evaluate.assess import assess
    from bandsolve.evaluate.compare import compare_methods

    folder = tmp_path_factory.mktemp("printed")
    bad = folder / "bad.csv"
    bad.write_text("not,a spectrum\nx\n", encoding="utf-8")
    batch = predict_inputs(demo["cls"], [str(demo["files"].routine[0]), str(bad)])
    assert [f.input for f in batch.failures] == [str(bad)]
    path = folder / "printed.html"
    write_report(demo["cls"], path, assessment=assess(demo["cls"], *demo["val"]),
                 comparison=compare_methods(*demo["cal"], n_permutations=99,
                                            max_components=5),
                 batch=batch)
    return path, path.read_text(encoding="utf-8"), batch


@pytest.mark.slow
def test_comparison_table_without_index_or_none(printed_report):
    _, text, _ = printed_report
    part = _section(text, "comparison")
    table = part.split("</div>")[-1]  # the results table follows the summary
    heads = re.findall(r"<th>(.*?)</th>", table)
    assert heads[:2] == ["analyte", "method"] and "RMSEP" in heads
    cells = re.findall(r"<td>(.*?)</td>", part)
    assert "None" not in cells and "–" in cells  # no test set: RMSEP is missing
    assert len(re.findall(r"<th>RMSECV</th>", part)) == 1  # the comparison table once
    assert "% smaller" in part or "% larger" in part or "no significant difference" in part
    assert "largest common shape in the CLS residuals" in part
    assert ">None<" not in text


def test_wide_assessment_table_is_shown_one_row_per_statistic(printed_report):
    _, text, _ = printed_report
    table = _section(text, "validation").split("</div>")[-1]
    heads = re.findall(r"<th>(.*?)</th>", table)
    assert heads == ["statistic", "dye A", "dye B", "dye C"]
    rows = re.findall(r"<tr>\s*<td>(.*?)</td>", table)
    # The last columns of the wide layout were the ones cut off at the page edge.
    assert rows[0] == "unit" and rows[-5:] == ["coverage", "coverage low", "coverage high",
                                               "model error SD", "model error relative"]


def test_skipped_batch_inputs_are_listed_with_their_reason(printed_report):
    _, text, batch = printed_report
    part = _section(text, "batch")
    failure = batch.failures[0]
    assert "1 batch input(s) could not be read and were skipped" in part
    assert f"<code>{failure.input}</code>: {html_escape(failure.reason)}" in part


@pytest.mark.slow
def test_cli_reports_skipped_batch_inputs_and_exits_partial(demo, tmp_path, capsys):
    from bandsolve.calibration.modelfile import save_model
    from bandsolve.cli import EXIT_PARTIAL, report_cmd

    parser = argparse.ArgumentParser()
    report_cmd.register(parser.add_subparsers())
    model = tmp_path / "m.bsm"
    save_model(demo["cls"], model)
    bad = tmp_path / "bad.csv"
    bad.write_text("not,a spectrum\nx\n", encoding="utf-8")
    out = tmp_path / "r.html"
    args = parser.parse_args(["report", str(model), "--batch", str(demo["files"].routine[1]),
                              str(bad), "--quiet", "--out", str(out)])
    assert args.func(args) == EXIT_PARTIAL == 3  # documented exit code of a partial batch
    err = capsys.readouterr().err
    assert f"bandsolve: skipped {bad}: " in err
    batch = _section(out.read_text(encoding="utf-8"), "batch")
    assert f"<code>{bad}</code>" in batch and "batch-2-05" in batch


@pytest.mark.slow
def test_headless_browser_renders_the_report(full_report, tmp_path):
    browser = chromium()
    if browser is None:
        pytest.skip("Chromium is not installed; the browser check needs it")
    written, _, _ = full_report
    shot = tmp_path / "shot.png"
    base = [browser, "--headless", "--no-sandbox", "--disable-gpu",
            "--disable-background-networking", "--disable-component-update", "--disable-sync",
            "--no-first-run", f"--user-data-dir={tmp_path / 'profile'}",
            "--host-resolver-rules=MAP * ~NOTFOUND"]
    run = subprocess.run([*base, f"--screenshot={shot}", "--window-size=1200,2000",
                          written.as_uri()], capture_output=True, timeout=180, check=False)
    assert run.returncode == 0, run.stderr.decode(errors="replace")[-2000:]
    data = shot.read_bytes()
    assert _png_header(data) == (1200, 2000)
    assert len(data) > 20_000  # a blank page compresses to a few kB; text and figures do not
    dom = subprocess.run([*base, "--dump-dom", written.as_uri()], capture_output=True,
                         timeout=180, check=False)
    assert dom.returncode == 0
    rendered = dom.stdout.decode("utf-8", errors="replace")
    for sid, _ in SECTION_IDS:
        assert f'id="{sid}"' in rendered


@pytest.mark.slow
def test_printed_pages_keep_every_word_of_the_summaries_and_tables(printed_report, demo,
                                                                    tmp_path):
    path, _, _ = printed_report
    text = printed_text(path, tmp_path)
    # What runs past the printable width of an A4 page is clipped and so missing from the
    # text of the PDF; every word of the model's figures-of-merit summary and every column
    # of the assessment must be on paper.
    printed = set(text.split())
    words = set(demo["cls"].merit.summary().split())
    words |= {"RMSEP/RMSECV", "consistency", "Holm"}
    assert not words - printed, sorted(words - printed)
