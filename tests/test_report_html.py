"""The HTML report: self-contained, escaped, and opening in a real browser without errors."""

import re
import shutil
import subprocess

import pytest

from conftest import REPO
from emispec.board import load_board
from emispec.cli import app
from emispec.explore import vary
from emispec.parameters import Template
from emispec.pipeline import estimate
from emispec.plan import plan_rows
from emispec.report import html_text

DEMO = REPO / "samples" / "beehive-gateway.toml"
CHROMIUM = shutil.which("chromium") or shutil.which("chromium-browser")
needs_chromium = pytest.mark.skipif(CHROMIUM is None, reason="Chromium not found (Debian package chromium)")


def render(path, tmp_path, width=1400):
    """Load the page in headless Chromium; return the DOM it built and its console lines."""
    done = subprocess.run(
        [CHROMIUM, "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
         "--disable-background-networking", "--disable-component-update", "--disable-sync",
         f"--user-data-dir={tmp_path / 'profile'}", "--enable-logging=stderr", "--v=0",
         f"--window-size={width},2000", "--virtual-time-budget=3000", "--dump-dom", path.as_uri()],
        capture_output=True, text=True, timeout=120, check=False,
    )
    assert done.returncode == 0, done.stderr[-2000:]
    console = [line for line in done.stderr.splitlines() if ":CONSOLE" in line]
    return done.stdout, console


@pytest.fixture(scope="module")
def evil_report(tmp_path_factory):
    """The demo with a title that tries to inject a script, plus variants."""
    folder = tmp_path_factory.mktemp("evil")
    text = DEMO.read_text().replace('title = "Beehive scale gateway, rev A"',
                                    'title = "<script>alert(1)</script> & <b>rev C</b>"')
    board_file = folder / "evil.toml"
    board_file.write_text(text)
    est = estimate(load_board(board_file))
    variants = vary(Template.load(board_file), {"clock[sdram_clk].rise_time": ["0.3 ns", "1 ns"]})
    page = folder / "report.html"
    page.write_text(html_text(est, plan_rows(est), variants), encoding="utf-8")
    return page, est


def test_report_is_self_contained_and_escaped(evil_report):
    page, est = evil_report
    text = page.read_text()
    assert "<script" not in text.lower()
    assert "&lt;script&gt;alert(1)&lt;/script&gt; &amp; &lt;b&gt;rev C&lt;/b&gt;" in text
    assert not re.search(r"""(src|href)\s*=\s*["']?(https?:|//)""", text)  # no external assets
    assert text.count("<svg") >= 4  # spectrum, swept, rail, variants
    assert "Estimate only: final compliance is decided by measurement at an accredited lab" in text
    assert est.board.sha256 in text and "Test plan" in text and "Variants" in text


@needs_chromium
def test_report_opens_in_chromium_without_errors(evil_report, tmp_path):
    page, est = evil_report
    dom, console = render(page, tmp_path)
    assert console == [], console
    assert "<table" in dom and dom.count("<svg") >= 4
    assert "<script" not in dom.lower()  # the title stayed text
    assert "&lt;script&gt;alert(1)&lt;/script&gt;" in dom
    assert est.verdict().split(";")[0].replace("<", "&lt;") in dom


def test_report_command_writes_one_file(runner, tmp_path):
    out = tmp_path / "r" / "report.html"
    result = runner.invoke(app, ["report", str(DEMO), "--out", str(out), "--set",
                                 "clock[sdram_clk].rise_time=0.3 ns,1 ns"])
    assert result.exit_code == 0, result.output
    assert sorted(p.name for p in out.parent.iterdir()) == ["report.html"]
    assert "Variants" in out.read_text()


# Measures the laid-out page (this probe is added to a copy of the report for the test only; the report itself
# has no script): the page must not scroll sideways, every table must fit or scroll inside its own box, and no
# text cell may be cut off.
LAYOUT_PROBE = """<script>
window.addEventListener("load", () => {
  const page = document.documentElement;
  const problems = [];
  if (page.scrollWidth > window.innerWidth + 1) problems.push("page " + page.scrollWidth + " > " + window.innerWidth);
  for (const box of document.querySelectorAll(".wide")) {
    if (box.getBoundingClientRect().right > window.innerWidth + 1) problems.push("table box past the edge");
  }
  for (const cell of document.querySelectorAll("td.text")) {
    if (cell.scrollWidth > cell.clientWidth + 1) problems.push("cut: " + cell.textContent.slice(0, 40));
  }
  const out = document.createElement("pre");
  out.id = "layout";
  out.textContent = problems.length ? problems.join("\\n") : "fits";
  document.body.appendChild(out);
});
</script>"""


@needs_chromium
@pytest.mark.parametrize("width", [900, 1400])
def test_report_layout_at_900_and_1400_px(evil_report, tmp_path, width):
    page, _ = evil_report
    probe = tmp_path / "probe.html"
    probe.write_text(page.read_text().replace("</body>", LAYOUT_PROBE + "</body>"), encoding="utf-8")
    dom, console = render(probe, tmp_path, width)
    assert console == [], console
    result = re.search(r'<pre id="layout">(.*?)</pre>', dom, re.S)
    assert result is not None and result.group(1) == "fits", result and result.group(1)
    assert "1 current source," in dom and "_QP" not in dom and "worst_margin_db" not in dom
