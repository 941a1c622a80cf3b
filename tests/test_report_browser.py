"""The report opens cleanly in a real browser: headless Chromium renders it with the
network blocked, and every figure decodes (non-zero natural width).

The report itself runs no script (its Content-Security-Policy forbids them), so the
test renders a copy into which it puts a probe script and a policy that allows only
that script: after the load event the probe writes ``data-figures-total`` and
``data-figures-loaded`` on ``<body>``, and ``--dump-dom`` prints the DOM after that.
A control renders the probe under the report's own policy and checks it never runs.
Skipped, with the reason, when no Chromium is installed (``apt-get install chromium``),
except where ``CAVCHAR_REQUIRE_BROWSER=1`` is set (CI sets it after installing Chromium):
there a missing browser fails the test. The browser's version is printed with the result.
"""

from __future__ import annotations

import os
import re
import shutil
import subprocess
from pathlib import Path

import pytest

pytest.importorskip("matplotlib")

_CANDIDATES = ("/usr/bin/chromium", "chromium", "chromium-browser")


def _browser() -> str | None:
    for name in _CANDIDATES:
        found = shutil.which(name) or (name if Path(name).is_file() else None)
        if found:
            return found
    return None


@pytest.fixture(scope="module")
def report_file(tmp_path_factory) -> Path:
    from cavchar.fits.jumps import fit_jumps
    from cavchar.inference import SamplerSettings
    from cavchar.io import write_jump_record
    from cavchar.report import write_report
    from cavchar.simulate import simulate_jump_record

    folder = tmp_path_factory.mktemp("browser")
    record = simulate_jump_record(0.02, 0.08, 60.0, seed=4)
    path = write_jump_record(record, folder / "record.csv")
    result = fit_jumps(path, freq_hz=6.1e9, stage_temp_k=0.03,
                       settings=SamplerSettings(n_walkers=16, quiet=True, seed=2))
    return write_report([result], folder / "report.html")


_PROBE = ("<script>addEventListener('load', () => {const images = [...document.images];"
          "document.body.dataset.figuresTotal = images.length;"
          "document.body.dataset.figuresLoaded = images.filter("
          "i => i.complete && i.naturalWidth > 0).length;});</script>")


def _with_probe(text: str, page: Path, *, keep_policy: bool = False) -> Path:
    """A copy of the report with the probe script (and, unless kept, a policy allowing it)."""
    if not keep_policy:  # the attribute's quotes may be written as &#39;
        text, count = re.subn(r"script-src (&#39;|')none(&#39;|')",
                              "script-src 'unsafe-inline'", text)
        assert count == 1, "the report's policy should name script-src 'none' once"
    page.write_text(text.replace("</body>", _PROBE + "</body>"), encoding="utf-8")
    return page


def _dump(browser: str, page: Path, profile: Path) -> str:
    command = [
        browser, "--headless", "--no-sandbox", "--disable-gpu",
        "--disable-background-networking", "--disable-component-update", "--no-first-run",
        "--disable-sync", f"--user-data-dir={profile}",
        # any attempt to reach a network host fails: the page must need none
        "--host-resolver-rules=MAP * ~NOTFOUND",
        "--virtual-time-budget=15000", "--dump-dom", page.resolve().as_uri(),
    ]
    done = subprocess.run(command, capture_output=True, text=True, timeout=180)
    assert done.returncode == 0, done.stderr[-2000:]
    return done.stdout


def _render(browser: str, page: Path, profile: Path) -> tuple[str, int, int]:
    dom = _dump(browser, page, profile)
    body = re.search(r"<body([^>]*)>", dom)
    assert body, "no <body> in the rendered page"
    total = re.search(r'data-figures-total="(\d+)"', body.group(1))
    loaded = re.search(r'data-figures-loaded="(\d+)"', body.group(1))
    assert total and loaded, "the page's load marker did not run"
    return dom, int(total.group(1)), int(loaded.group(1))


def _need_browser() -> str:
    browser = _browser()
    if browser is None:
        reason = ("no Chromium browser is installed (apt-get install -y chromium); "
                  "the headless rendering check needs one")
        if os.environ.get("CAVCHAR_REQUIRE_BROWSER") == "1":
            pytest.fail(reason)
        pytest.skip(reason)
    return browser


def test_browser_version_is_recorded(record_property):
    """Names the browser that renders the pages below (in the test output and JUnit XML)."""
    browser = _need_browser()
    done = subprocess.run([browser, "--version"], capture_output=True, text=True, timeout=60)
    version = done.stdout.strip() or done.stderr.strip()
    assert "chrom" in version.lower(), version
    record_property("browser", version)
    print(f"report rendered by: {version}")


def test_report_renders_in_headless_chromium(report_file, tmp_path):
    browser = _need_browser()
    page = _with_probe(report_file.read_text(encoding="utf-8"), tmp_path / "probed.html")
    dom, total, loaded = _render(browser, page, tmp_path / "profile")
    n_images = len(re.findall(r"<img\b", report_file.read_text(encoding="utf-8")))
    assert total == n_images >= 4
    assert loaded == n_images, "some figure did not load"
    assert 'id="summary-1"' in dom and "energy lifetime T_c" in dom


def test_a_broken_figure_is_noticed(report_file, tmp_path):
    """Negative control: with one figure's data spoiled the marker counts one fewer."""
    browser = _need_browser()
    text = report_file.read_text(encoding="utf-8")
    spoiled = re.sub(r'src="data:image/png;base64,[^"]*"', 'src="data:image/png;base64,AAAA"',
                     text, count=1)
    page = _with_probe(spoiled, tmp_path / "spoiled.html")
    _, total, loaded = _render(browser, page, tmp_path / "profile")
    assert loaded == total - 1


def test_the_report_policy_stops_scripts(report_file, tmp_path):
    """Control: under the report's own Content-Security-Policy the probe never runs."""
    browser = _need_browser()
    page = _with_probe(report_file.read_text(encoding="utf-8"), tmp_path / "kept.html",
                       keep_policy=True)
    dom = _dump(browser, page, tmp_path / "profile")
    body = re.search(r"<body([^>]*)>", dom)
    assert body and "data-figures-total" not in body.group(1)
