"""`seqlang report`: one self-contained HTML file whose numbers are the JSON's, checked in Chromium."""
from __future__ import annotations

import hashlib
import json
import re
import shutil
from html.parser import HTMLParser
from pathlib import Path

import pytest

import seqlang
from seqlang.emit.tables import timing_csv
from seqlang.report import build_report
from seqlang.sim.commands import as_document

ROOT = Path(__file__).resolve().parent.parent
BELL = ROOT / "programs" / "bell_pair.seq"
OPTIONS = {"noise": "all", "shots": 6, "seed": 7}  # few shots: the test checks wiring, not statistics
SECTIONS = ("caution", "summary", "program", "rig", "compile", "pairs", "prediction", "budget", "provenance")
BROWSER_ARGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking",
                "--disable-component-update", "--no-first-run", "--disable-sync"]


@pytest.fixture(scope="module")
def bell():
    return seqlang.load(str(BELL))


@pytest.fixture(scope="module")
def report(bell):
    return build_report(bell, **OPTIONS)


@pytest.fixture(scope="module")
def report_file(report, tmp_path_factory):
    path = tmp_path_factory.mktemp("report") / "report.html"
    path.write_text(report, encoding="utf-8")
    return path


class _Cells(HTMLParser):
    """Collects every element with data-key (its exact data-value and shown text) and the JSON block."""

    def __init__(self):
        super().__init__()
        self.cells, self.json_text, self._stack = {}, "", []

    def handle_starttag(self, tag, attrs):
        attrs = dict(attrs)
        if "data-key" in attrs:
            self._stack.append([attrs["data-key"], None, ""])
        elif self._stack and attrs.get("data-value") and self._stack[-1][1] is None:
            self._stack[-1][1] = attrs["data-value"]
        if tag == "script" and attrs.get("id") == "seqlang-data":
            self._stack.append(["#json", None, ""])

    def handle_data(self, data):
        if self._stack:
            self._stack[-1][2] += data

    def handle_endtag(self, tag):
        if self._stack and tag in ("td", "script"):
            key, value, text = self._stack.pop()
            if key == "#json":
                self.json_text = text
            else:
                self.cells[key] = (value, text.strip())


def _parse(html: str) -> _Cells:
    cells = _Cells()
    cells.feed(html)
    return cells


def test_report_numbers_equal_the_json(bell, report):
    cells = _parse(report)
    documents = json.loads(cells.json_text)
    independent = as_document(seqlang.simulate(bell, **OPTIONS, repetitions=OPTIONS["shots"]))
    assert documents["simulation"] == json.loads(json.dumps(independent)), "the same run as simulate --json"
    e = documents["simulation"]["expectations"][0]
    assert float(cells.cells["fidelity"][0]) == e["fidelity"]
    assert cells.cells["fidelity"][1].startswith(f"{e['fidelity']:.5f} ± ")
    for key in ("residual_rydberg", "loss"):
        assert float(cells.cells[key][0]) == e[key]
    for outcome, value in e["populations"].items():
        assert float(cells.cells[f"populations.{outcome}"][0]) == value
    for pair, value in e["correlators"].items():
        assert float(cells.cells[f"correlators.{pair}"][0]) == value
        assert cells.cells[f"correlators.{pair}"][1].startswith(f"{value:.3f}")


def test_report_budget_equals_the_budget_json(report):
    cells = _parse(report)
    budget = json.loads(cells.json_text)["budget"]
    infidelity = budget["expectations"][0]["infidelity"]
    assert float(cells.cells["budget.all"][0]) == infidelity["all"]
    assert float(cells.cells["budget.none"][0]) == infidelity["none"]
    for name in set(infidelity) - {"all", "none"} - set(budget["not_declared"]):
        assert float(cells.cells[f"budget.{name}"][0]) == pytest.approx(infidelity[name] - infidelity["none"])
    for name in budget["not_declared"]:
        assert f"budget.{name}" not in cells.cells
    assert "not declared — no image in the sequence" in report


def test_report_holds_every_section_and_the_caution(bell, report):
    for section in SECTIONS:
        assert f'<section id="{section}">' in report
    assert "licensed safety officer" in report
    assert report.count("<svg") >= 4, "timeline, populations, correlators and budget figures inline"
    header, *rows = [line for line in timing_csv(bell.checked).splitlines() if not line.startswith("#")]
    assert "<th>time_ns</th>" in report
    first = rows[0].split(",")
    assert "".join(f"<td>{c}</td>" for c in first) in report, "the timing excerpt is timing.csv's rows"
    assert "d-h" in report and "58S1/2 + 62S1/2" in report, "the Rydberg pair"


def test_report_provenance_names_versions_hashes_and_seed(report):
    assert '<td id="seed">7</td>' in report
    for name in ("bell_pair.seq", "millpond.rig"):
        digest = hashlib.sha256((ROOT / "programs" / name).read_bytes()).hexdigest()
        assert digest in report
    for package in ("seqlang", "numpy", "scipy", "qutip", "matplotlib", "arc-alkali-rydberg-calculator"):
        assert f"<th>{package}</th>" in report


def test_report_is_self_contained(report):
    assert not re.search(r"""(?:src|href)\s*=\s*["'](?:https?:)?//""", report), "no network resources"
    assert not re.search(r"<link\b|<script\b[^>]*\bsrc=|@import|url\(\s*['\"]?http", report)
    scripts = re.findall(r"<script\b([^>]*)>", report)
    assert scripts == [' type="application/json" id="seqlang-data"'], "no code runs in the page"


def test_report_is_byte_identical_for_identical_inputs(bell):
    options = {"noise": "decay", "shots": 1, "budget": False}
    assert build_report(bell, **options) == build_report(bell, **options)


def test_report_command_writes_the_file(tmp_path, capsys):
    from seqlang.cli import main
    out = tmp_path / "r.html"
    assert main(["report", str(ROOT / "programs" / "rabi_ramsey.seq"), "-o", str(out), "--shots", "3",
                 "--no-budget"]) == 0
    text = out.read_text(encoding="utf-8")
    assert "<section id=\"budget\">" in text and "No budget was computed" in text
    assert "CAUTION" in capsys.readouterr().out
    assert main(["report", str(ROOT / "programs" / "rabi_ramsey.seq"), "-o", str(out), "--noise", "bogus"]) == 2


def _chromium() -> str | None:
    for candidate in ("/usr/bin/chromium", shutil.which("chromium"), shutil.which("chromium-browser")):
        if candidate and Path(candidate).exists():
            return candidate
    return None


def test_report_in_headless_chromium(report_file, tmp_path):
    """Loads with no console errors and no network requests; every section and figure is on screen."""
    executable = _chromium()
    if executable is None:
        pytest.skip("no Chromium found (Debian: apt-get install chromium); .ci/run installs it")
    sync_api = pytest.importorskip("playwright.sync_api", reason="playwright (a test dependency) is missing")
    with sync_api.sync_playwright() as p:
        browser = p.chromium.launch(executable_path=executable, args=BROWSER_ARGS)
        page = browser.new_page(viewport={"width": 1280, "height": 900})
        problems, requests = [], []
        page.on("console", lambda m: problems.append(m.text) if m.type in ("error", "warning") else None)
        page.on("pageerror", lambda exc: problems.append(str(exc)))
        page.on("request", lambda r: requests.append(r.url))
        page.goto(report_file.as_uri())
        page.wait_for_load_state("load")
        for section in SECTIONS:
            box = page.locator(f"#{section}").bounding_box()
            assert box and box["height"] > 20, f"section {section} is shown"
        for figure in ("timeline-figure", "populations-figure", "correlators-figure", "budget-figure"):
            box = page.locator(f"#{figure} svg").bounding_box()
            assert box and box["width"] > 400 and box["height"] > 150, f"{figure} is drawn"
        heading = page.locator("#prediction h3").first.inner_text()
        shot = tmp_path / "report.png"
        page.screenshot(path=str(shot), full_page=True)
        browser.close()
    assert problems == []
    assert all(url.startswith(("file:", "data:")) for url in requests), requests
    assert heading == "expect d, h as psi_plus"
    import matplotlib.image
    pixels = matplotlib.image.imread(str(shot))[..., :3]
    assert pixels.shape[0] > 2000 and (pixels < 0.9).any(axis=-1).mean() > 0.03, "a non-blank page"


def test_report_help_lists_its_options(capsys):
    from seqlang.cli import main
    with pytest.raises(SystemExit) as stop:
        main(["report", "--help"])
    assert stop.value.code == 0
    out = capsys.readouterr().out
    for option in ("-o", "--noise", "--shots", "--seed", "--no-budget", "--linear-time"):
        assert option in out
