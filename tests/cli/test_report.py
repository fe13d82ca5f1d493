"""``qmc report``: one self-contained HTML page of a real (short) run.

The page is checked as a file (every image is an embedded PNG that Python's own PNG signature check accepts,
no script, no address outside the page) and in a real browser: Debian's chromium (headless) loads a copy
with a small checking script appended and reports every image decoded with its pixel size.  Without a
chromium binary that test is skipped, saying so.
"""

from __future__ import annotations

import base64
import html
import json
import re
import shutil
import subprocess
from html.parser import HTMLParser
from pathlib import Path

import pytest
from click.testing import CliRunner
from helpers.configs import write_config

import qmc
from qmc.cli.main import cli

COLUMNAR = dict(run_name="report-test", seed=77,
                terms=[{"type": "heisenberg", "bonds": "columnar-weak", "coupling": 1.0},
                       {"type": "heisenberg", "bonds": "columnar-strong", "coupling": "g"}],
                scan={"L": [4, 8], "g": [1.2, 1.6, 2.0, 2.4, 2.8], "beta": "L"},
                warmup_steps=100, measure_steps=640, bins=16)
"""Keywords of helpers.configs.write_config: the columnar dimerized square lattice around its Neel to
dimer-singlet transition (g_c near 1.9); the curves of L = 4 and 8 cross inside the scan."""

PNG = b"\x89PNG\r\n\x1a\n"


class Page(HTMLParser):
    """Images, links, scripts and headings of a page."""

    def __init__(self) -> None:
        super().__init__()
        self.images: list[dict] = []
        self.links: list[str] = []
        self.scripts = 0
        self.headings: list[str] = []
        self._in_h2 = False

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        if tag == "img":
            self.images.append(a)
        if tag == "a" and "href" in a:
            self.links.append(a["href"])
        self.scripts += tag == "script"
        self._in_h2 = tag == "h2"

    def handle_data(self, data):
        if self._in_h2:
            self.headings.append(data)
            self._in_h2 = False


@pytest.fixture(scope="module")
def report(tmp_path_factory) -> tuple[Path, Path]:
    tmp = tmp_path_factory.mktemp("report")
    write_config(tmp, "config.toml", **COLUMNAR)
    run_dir = qmc.run_config(tmp / "config.toml", progress=False)
    result = CliRunner().invoke(cli, ["report", str(run_dir)])
    assert result.exit_code == 0, result.output
    assert result.output.strip() == f"written: {run_dir / 'report.html'}"
    return run_dir, run_dir / "report.html"


def parse(path: Path) -> Page:
    page = Page()
    page.feed(path.read_text(encoding="utf-8"))
    return page


def test_the_page_holds_everything_and_needs_nothing_else(report):
    run_dir, path = report
    page = parse(path)
    text = path.read_text(encoding="utf-8")
    assert page.scripts == 0
    assert not re.search(r"""(src|href)\s*=\s*["']?(https?:|//|file:)""", text)  # nothing from elsewhere
    for img in page.images:
        assert img["src"].startswith("data:image/png;base64,")
        assert base64.b64decode(img["src"].split(",", 1)[1])[:8] == PNG
    alts = {img["alt"] for img in page.images}
    names = set(qmc.load_run(run_dir).observable)
    assert {f"obs_{n.replace('/', '_')}" for n in names} <= alts  # every observable against the coupling
    assert {"vbs_L4", "vbs_L8"} <= alts
    assert {"crossings_stiffness_L", "crossings_xi_over_L", "collapse_stiffness_L"} <= alts
    for heading in ("Model and lattice", "Scan", "Warnings", "Ground-state check",
                    "Crossings and critical coupling", "Observables against the coupling",
                    "Valence-bond histograms", "All estimates", "Provenance"):
        assert heading in page.headings
    assert "H = 1 sum_columnar-weak S_i.S_j + g sum_columnar-strong S_i.S_j" in text and "beta = L" in text
    assert "one pair of sizes (L = 4, 8): no extrapolation" in text
    assert 'name = "report-test"' in html.unescape(text)  # the configuration as written
    assert "10 task(s): 10 done" in text
    csv = next(h for h in page.links if h.startswith("data:text/csv;base64,"))
    assert base64.b64decode(csv.split(",", 1)[1]).decode().startswith("L,beta,g,task,")
    added = sorted(p.name for p in run_dir.iterdir())
    # the page alone added (claims/ holds the index lock and, while tasks run, their claims)
    assert added == ["claims", "config.toml", "index.json", "report.html", "run.log", "tasks"]


CHECK = """<script>
window.addEventListener("load", function () {
  var imgs = Array.prototype.slice.call(document.images);
  var out = document.createElement("pre");
  out.id = "qmc-check";
  out.textContent = JSON.stringify({
    images: imgs.length,
    broken: imgs.filter(function (i) { return !(i.complete && i.naturalWidth > 0); }).map(function (i) {
      return i.alt; }),
    sizes: imgs.map(function (i) { return [i.naturalWidth, i.naturalHeight]; })});
  document.body.appendChild(out);
});
</script>"""


def chromium() -> str | None:
    return next((p for p in map(shutil.which, ("chromium", "chromium-browser")) if p), None)


@pytest.mark.skipif(chromium() is None, reason="no chromium binary on this machine (Debian: apt-get install "
                                                "chromium): the page is not checked in a real browser")
def test_the_page_loads_in_a_headless_browser_with_every_image_decoded(report, tmp_path):
    _, path = report
    n_images = len(parse(path).images)
    probe = tmp_path / "probe.html"
    probe.write_text(path.read_text(encoding="utf-8").replace("</body>", CHECK + "</body>"), encoding="utf-8")
    out = subprocess.run(
        [chromium(), "--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking",
         "--disable-extensions", "--virtual-time-budget=15000", "--dump-dom", probe.as_uri()],
        capture_output=True, text=True, timeout=180)
    m = re.search(r'<pre id="qmc-check">(.*?)</pre>', out.stdout, re.S)
    assert m, f"chromium gave no result (exit {out.returncode}): {out.stderr[-2000:]}"
    check = json.loads(m.group(1).replace("&quot;", '"'))
    assert check["images"] == n_images > 20
    assert check["broken"] == []
    assert all(w >= 300 and h >= 200 for w, h in check["sizes"])  # real figures, not placeholders
    shot = tmp_path / "page.png"
    subprocess.run([chromium(), "--headless", "--no-sandbox", "--disable-gpu",
                    "--disable-background-networking", f"--screenshot={shot}", "--window-size=1200,2000",
                    path.as_uri()], capture_output=True, timeout=180)
    assert shot.read_bytes()[:8] == PNG  # the page itself (no script) renders
