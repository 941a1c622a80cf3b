"""The HTML report: written atomically, self-contained, with the numbers of the result.

Outside checks: the PNG files embedded in the page are checked against the PNG
specification (ISO/IEC 15948: signature and IHDR chunk); the number rounding
against the Particle Data Group rounding rule (Review of Particle Physics,
"Rounding", from memory); the summary numbers against numpy quantiles of the
posterior draws.
"""

from __future__ import annotations

import base64
import re
import struct

import numpy as np
import pytest

from cavchar.errors import InputError

pytest.importorskip("matplotlib")
pytest.importorskip("corner")

LIFETIME, N_THERMAL, FREQ, STAGE = 0.035, 0.06, 7.9e9, 0.025


@pytest.fixture(scope="module")
def fitted(tmp_path_factory):
    """A real jump fit of a short simulated record (small ensemble to stay quick)."""
    from cavchar.fits.jumps import fit_jumps
    from cavchar.inference import SamplerSettings
    from cavchar.io import write_jump_record
    from cavchar.simulate import simulate_jump_record

    folder = tmp_path_factory.mktemp("report")
    record = simulate_jump_record(LIFETIME, N_THERMAL, 120.0, seed=11)
    path = write_jump_record(record, folder / "record.csv")
    settings = SamplerSettings(n_walkers=16, max_steps=4000, quiet=True, seed=3)
    result = fit_jumps(path, freq_hz=FREQ, stage_temp_k=STAGE, settings=settings)
    result_path = result.to_json(folder / "result.json")
    return result, result_path, folder


@pytest.fixture(scope="module")
def single_page(fitted):
    from cavchar.report import write_report

    result, _, folder = fitted
    return write_report([result], folder / "one.html").read_text(encoding="utf-8")


@pytest.fixture(scope="module")
def combined_page(fitted, tmp_path_factory):
    """Two results (one from its JSON file) with a note, a qualification and a trend."""
    from cavchar.report import Section, render_report
    from cavchar.tracking import cooldown_trend, log_fit_result, open_log
    from cavchar.tracking.qualify import Evidence, parse_spec, qualify

    result, result_path, _ = fitted
    spec = parse_spec('title = "test spec"\n[lifetime]\nat_least = "10 ms"\ncredibility = 0.95\n'
                      '[thermal_photons]\nat_most = 0.001\ncredibility = 0.9\n')
    evidence = Evidence("the fixture fit", draws={"lifetime": result.samples["lifetime"],
                                                  "n_thermal": result.samples["n_thermal"]},
                        freq_hz=FREQ)
    log_path = tmp_path_factory.mktemp("log") / "log.sqlite"
    with open_log(log_path) as log:
        log.add_cavity("test cavity", freq_hz=FREQ)
        log.add_cooldown("first", start_date="2031-01-05", stage_temp_k=STAGE)
        log.add_cooldown("second", start_date="2031-02-05", stage_temp_k=STAGE)
    log_fit_result(result, "test cavity", "first", log_path)
    log_fit_result(result, "test cavity", "second", log_path, on_duplicate="keep")
    with open_log(log_path) as log:
        trend = cooldown_trend(log, "test cavity", reference="first")
    return render_report([result, str(result_path)], labels=["in memory", "from file"],
                         extra_sections=[Section("A note", "<p>hello there</p>"),
                                         qualify(spec, evidence), trend])


def _images(page: str) -> list[bytes]:
    sources = re.findall(r'<img\b[^>]*\bsrc="([^"]*)"', page)
    out = []
    for src in sources:
        assert src.startswith("data:image/png;base64,"), src[:60]
        out.append(base64.b64decode(src.split(",", 1)[1], validate=True))
    return out


def _png_size(data: bytes) -> tuple[int, int]:
    # PNG specification: 8-byte signature, then the IHDR chunk with width and height
    assert data[:8] == b"\x89PNG\r\n\x1a\n"
    assert data[12:16] == b"IHDR"
    return struct.unpack(">II", data[16:24])


def test_report_is_self_contained(single_page):
    page = single_page
    # nothing to load from a network: no http(s) or protocol-relative references
    assert not re.search(r"""(src|href|action)\s*=\s*["']?\s*(https?:|//)""", page, re.I)
    assert not re.search(r"url\(\s*['\"]?\s*(https?:|//)", page, re.I)
    assert "@import" not in page
    assert "<link" not in page.lower()
    images = _images(page)
    # record + dwell check (jump plots), corner plot, chain traces
    assert len(images) >= 4
    for data in images:
        width, height = _png_size(data)
        assert width > 100 and height > 100
    assert page.count('<img') == len(images)
    for heading in ("Summary", "Planck check", "Data and fit", "Posterior and sampler",
                    "Provenance", "Cautions"):
        assert heading in page
    assert "controls nothing" in page and "Cryogens" in page


def _summary_rows(page: str, index: int = 1) -> dict[str, list[str]]:
    block = page.split(f'<div id="summary-{index}">', 1)[1].split("</table>", 1)[0]
    rows = {}
    for row in re.findall(r"<tr>(.*?)</tr>", block):
        cells = [re.sub(r"<[^>]+>", "", c) for c in re.findall(r"<t[hd][^>]*>(.*?)</t[hd]>", row)]
        rows[cells[0]] = cells[1:]
    return rows


def test_summary_numbers_match_the_draws(fitted, single_page):
    result, page = fitted[0], single_page
    rows = _summary_rows(page)
    life = result.samples["lifetime"].to_numpy()
    median, row = float(np.median(life)), rows["energy lifetime T_c"]
    assert row[3] == "ms"
    shown = float(row[0]) * 1e-3
    lo68, hi68 = (float(v) * 1e-3 for v in row[1].split(" – "))
    # numpy quantiles of the same draws; the table rounds to its last shown digit
    step = 10.0 ** -len(row[0].split(".")[1]) * 1e-3 if "." in row[0] else 1e-3
    assert abs(shown - median) <= 0.51 * step
    q_lo, q_hi = np.quantile(life, [0.158655, 0.841345])
    assert abs(lo68 - q_lo) <= 0.51 * step and abs(hi68 - q_hi) <= 0.51 * step
    for label in ("quality factor Q = 2π ν T_c", "linewidth (FWHM) 1/(2π T_c)",
                  "thermal photon number n_th", "effective temperature T_eff"):
        assert label in rows
    assert rows["effective temperature T_eff"][3] == "mK"
    assert rows["quality factor Q = 2π ν T_c"][3].startswith("× 10")


def test_one_line_forms(fitted, single_page):
    result, page = fitted[0], single_page
    match = re.search(r"<code>(T_c = ([\d.]+)\(\+([\d.]+)/-([\d.]+)\) ms \(68% credible\))</code>",
                      page)
    assert match, "one-line form of the lifetime missing"
    life = result.samples["lifetime"].to_numpy() * 1e3
    lo, med, hi = np.quantile(life, [0.158655, 0.5, 0.841345])
    value, plus, minus = (float(match.group(i)) for i in (2, 3, 4))
    digits = len(match.group(2).split(".")[1]) if "." in match.group(2) else 0
    half = 0.51 * 10.0**-digits
    assert abs(value - med) <= half
    assert abs(plus - (hi - med)) <= half and abs(minus - (med - lo)) <= half
    assert re.search(r"<code>n_th = [\d.]+\(\+[\d.]+/-[\d.]+\)(e-?\d+)? \(68% credible\)</code>",
                     page)


def test_planck_check_in_words(single_page):
    page = single_page
    # n_th = 0.06 at 7.9 GHz is far above the Planck occupation at 25 mK (~3e-7)
    assert "The mode is hotter than its 25 mK stage with probability" in page
    assert "effective temperature" in page


def test_existing_file_needs_force(fitted, monkeypatch):
    import cavchar.report.html as report_html
    from cavchar.report import write_report

    result, _, folder = fitted
    target = folder / "twice.html"
    target.write_text("old")
    with pytest.raises(InputError, match="already exists"):
        write_report([result], target)  # refused before any work is done
    assert target.read_text() == "old"
    monkeypatch.setattr(report_html, "render_report", lambda *a, **k: "<!DOCTYPE html>new")
    write_report([result], target, force=True)
    assert target.read_text() == "<!DOCTYPE html>new"
    assert [p.name for p in folder.iterdir() if p.name.startswith(".")] == []  # no temp left


def test_several_results_and_extra_sections(combined_page):
    page = combined_page
    assert 'id="comparison"' in page and "Results side by side" in page
    assert 'id="summary-1"' in page and 'id="summary-2"' in page
    assert "<p>hello there</p>" in page
    # T_c ~ 35 ms clears 10 ms; n_th ~ 0.06 is far above 0.001
    assert '<span class="badge pass">PASS</span>' in page
    assert '<span class="badge fail">FAIL</span>' in page
    # the result read back from JSON has no walker chain: the trace figure says so
    assert "keeps no walker chain" in page
    assert "Trend across cooldowns: test cavity" in page
    assert "P(T_c fell by &gt; 10% vs first)" in page
    for data in _images(page):
        assert min(_png_size(data)) > 100


@pytest.mark.parametrize(("error", "decimals"), [
    (0.0123, 3),   # leading 123: two significant digits -> 0.012
    (0.0456, 2),   # leading 456: one significant digit -> 0.05
    (0.0987, 2),   # leading 987: rounds up to 0.10, two digits
    (3.54, 1),     # 354: two digits -> 3.5
    (3.55, 0),     # 355: one digit -> 4
    (0.355, 1),    # 355 although 0.355 / 1e-3 is 354.99... in binary floating point
    (27.0, 0),     # 270: two digits -> 27
    (270.0, -1),   # 270: two digits -> 270
])
def test_rounding_follows_the_pdg_rule(error, decimals):
    """The rule of the Particle Data Group's Review of Particle Physics (introduction,
    rounding); one function serves the summary line, tables and reports."""
    from cavchar.report import text
    from cavchar.units import decimals_for

    assert decimals_for(error) == decimals
    assert text.decimals_for is decimals_for


def test_interval_formatting_keeps_asymmetry():
    from cavchar.report.text import format_interval_row

    row = {"median": 0.061, "lo68": 0.058, "hi68": 0.065, "lo95": 0.0551, "hi95": 0.0702}
    text = format_interval_row(row, "temperature")
    assert text["unit"] == "mK"
    assert text["median"] == "61.0" and text["errors"] == "+4.0/−3.0"
    assert text["interval95"] == "55.1 – 70.2"


def test_importing_the_report_package_is_light(modules_loaded_by):
    assert modules_loaded_by("cavchar.report", ("matplotlib", "corner")) == []


def test_style_reads_in_greyscale():
    """Series differ by line style and marker as well as colour, and the colours step in
    lightness (ITU-R BT.601 luma weights 0.299, 0.587, 0.114) by at least 0.05."""
    import matplotlib.colors as mcolors

    from cavchar.plots.style import LINESTYLES, MARKERS, PALETTE, series

    luma = [float(np.dot(mcolors.to_rgb(c), [0.299, 0.587, 0.114])) for c in PALETTE]
    assert all(b - a >= 0.05 for a, b in zip(luma, luma[1:]))
    kinds = [series(i) for i in range(len(PALETTE))]
    assert len({str(k["linestyle"]) for k in kinds}) == len(LINESTYLES) == len(PALETTE)
    assert len({k["marker"] for k in kinds}) == len(MARKERS) == len(PALETTE)


def test_style_is_local():
    import matplotlib

    from cavchar.plots.style import apply_style

    before = dict(matplotlib.rcParams)
    with apply_style():
        assert matplotlib.rcParams["axes.titlelocation"] == "left"
    assert dict(matplotlib.rcParams) == before


def test_save_figure_writes_png_and_pdf_and_refuses_to_overwrite(fitted, tmp_path):
    from cavchar.plots.posterior import corner_plot, save_figure

    fig = corner_plot(fitted[0], truths={"lifetime": LIFETIME, "n_thermal": N_THERMAL})
    png, pdf = save_figure(fig, tmp_path / "corner")
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert pdf.read_bytes()[:5] == b"%PDF-"  # PDF header (ISO 32000-1, 7.5.2)
    pdf.unlink()
    with pytest.raises(InputError, match="already exists"):
        save_figure(fig, tmp_path / "corner")
    assert not pdf.exists()  # every target is checked before anything is written
    save_figure(fig, tmp_path / "corner", force=True)
    assert pdf.exists()
