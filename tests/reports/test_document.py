"""`livestep report` and write_report: the whole page, its structure, verdicts, escaping,
PNG files, and (when chromium is installed) rendering in a headless browser.

The recording: four steps of wn^2/(s^2 + 2 zeta wn s + wn^2), each simulated by
scipy.signal.step with its own damping ratio. Their overshoots are Ogata's closed form
100 exp(-zeta pi / sqrt(1 - zeta^2)) (Modern Control Engineering, ch. 5): 37.2 %
(zeta 0.3), 4.6 % (0.7), 20.5 % (0.45) and 0.15 % (0.9), so against "overshoot at most
10 %" steps 0 and 2 fail and steps 1 and 3 pass.
"""

from __future__ import annotations

import html
import math
import re
import shutil
import subprocess
import xml.etree.ElementTree as ET
from dataclasses import replace
from html.parser import HTMLParser
from pathlib import Path

import numpy as np
import pytest
from scipy import signal

from livestep.cli import main
from livestep.judge.profile import parse_profile
from livestep.reports import read_session_info, write_report
from livestep.sources.recording import RecordingReader
from livestep.steps.analysis import AnalysisSettings, analyze_chunks

WN, RATE, HOLD = 30.0, 2000.0, 1.5
ZETAS = (0.3, 0.7, 0.45, 0.9)
LEVELS = (10.0, 14.0, 11.0, 16.0)
FAILING = [0, 2]
PROFILE = """name = "overshoot gate"
[limits]
overshoot_pct = { max = 10 }
rise_time = { max = 1.0 }
"""
COUNTERS = ('{"bytes": 4321, "samples": 15000, "bad": {"garbage": 2}, "bad_total": 2,'
            ' "gaps": 0, "lost": 0, "resyncs": 1, "reconnects": 0, "log_lines": 0,'
            ' "restarts": 0}')


def _overshoot(zeta: float) -> float:
    """Ogata ch. 5: percent overshoot of the standard second-order step."""
    return 100.0 * math.exp(-zeta * math.pi / math.sqrt(1.0 - zeta * zeta))


def test_the_chosen_damping_ratios_straddle_the_limit() -> None:
    assert [i for i, z in enumerate(ZETAS) if _overshoot(z) > 10.0] == FAILING
    assert all(abs(_overshoot(z) - 10.0) > 5.0 for z in ZETAS)  # far from the limit


def _write_recording(path: Path) -> None:
    n = int(HOLD * RATE)
    t = np.arange(n * (len(ZETAS) + 1)) / RATE
    sp = np.full(t.size, 8.0)
    fb = np.full(t.size, 8.0)
    prev = 8.0
    for k, (zeta, level) in enumerate(zip(ZETAS, LEVELS, strict=True)):
        seg = slice((k + 1) * n, (k + 2) * n)
        sys_ = signal.TransferFunction([WN**2], [1.0, 2 * zeta * WN, WN**2])
        _, y = signal.step(sys_, T=t[seg] - t[seg][0])
        sp[seg] = level
        fb[seg] = prev + (level - prev) * y
        prev = level
    with path.open("w") as fh:
        fh.write("# start: 2026-11-30T09:15:02+00:00\n# livestep: 0.1.0\n"
                 "# source: socket://bench-7:7000\n# decoder: text, comma\n"
                 "t,setpoint,feedback\n")
        np.savetxt(fh, np.column_stack((t, sp, fb)), fmt="%.6f", delimiter=",")
        fh.write(f"# counters: {COUNTERS}\n")


@pytest.fixture(scope="module")
def made(tmp_path_factory: pytest.TempPathFactory) -> dict[str, Path]:
    """One report made through the command line, with PNG files."""
    d = tmp_path_factory.mktemp("report")
    rec, prof = d / "axis.csv", d / "gate.toml"
    _write_recording(rec)
    prof.write_text(PROFILE)
    out, png = d / "axis.html", d / "png"
    assert main(["report", str(rec), "--profile", str(prof), "-o", str(out),
                 "--png", str(png), "--jobs", "1"]) == 0
    return {"dir": d, "recording": rec, "html": out, "png": png}


class _Page(HTMLParser):
    """Collects what the tests look at: elements by tag, step articles in page order with
    their verdict, text per element id, and every URL-bearing attribute."""

    def __init__(self) -> None:
        super().__init__(convert_charrefs=True)
        self.tags: dict[str, int] = {}
        self.ids: list[str] = []
        self.articles: list[tuple[str, str]] = []  # (id, class)
        self.verdict_of: dict[str, str] = {}
        self.urls: list[str] = []
        self.text: dict[str, str] = {}
        self._article: str | None = None
        self._in_h3_verdict = False
        self._open: list[tuple[str, str | None]] = []

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        a = dict(attrs)
        self.tags[tag] = self.tags.get(tag, 0) + 1
        if "id" in a and a["id"]:
            self.ids.append(a["id"])
        for k in ("src", "href", "action", "data", "xlink:href"):
            if a.get(k):
                self.urls.append(a[k] or "")
        if tag == "article":
            self._article = a.get("id")
            self.articles.append((a.get("id") or "", a.get("class") or ""))
        if tag == "span" and "verdict" in (a.get("class") or "") and self._article and \
                self._article not in self.verdict_of and self._open and \
                self._open[-1][0] == "h3":
            self._in_h3_verdict = True
        if tag not in _VOID:
            self._open.append((tag, a.get("id")))

    def handle_startendtag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        self.handle_starttag(tag, attrs)
        if self._open and self._open[-1][0] == tag:
            self._open.pop()

    def handle_endtag(self, tag: str) -> None:
        while self._open:
            t, _ = self._open.pop()
            if t == tag:
                break
        if tag == "article":
            self._article = None
        if tag == "span":
            self._in_h3_verdict = False

    def handle_data(self, data: str) -> None:
        if self._in_h3_verdict and self._article:
            self.verdict_of[self._article] = data.split()[-1]
        for _, i in self._open:
            if i:
                self.text[i] = self.text.get(i, "") + data


_VOID = {"meta", "br", "img", "input", "link", "hr"}


class _Rows(HTMLParser):
    """The rows of the first table inside the element with a given id, as cell texts."""

    def __init__(self, within: str) -> None:
        super().__init__(convert_charrefs=True)
        self.within, self.depth, self.done = within, 0, False
        self.rows: list[list[str]] = []
        self._cell: list[str] | None = None

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        if dict(attrs).get("id") == self.within:
            self.depth = 1
        elif self.depth and not self.done:
            if tag == "tr":
                self.rows.append([])
            elif tag in ("td", "th") and self.rows:
                self._cell = []
            elif tag == "br" and self._cell is not None:
                self._cell.append(" ")

    def handle_endtag(self, tag: str) -> None:
        if self.depth and tag in ("td", "th") and self._cell is not None:
            self.rows[-1].append(" ".join("".join(self._cell).split()))
            self._cell = None
        elif self.depth and tag == "table" and self.rows:
            self.done = True

    def handle_data(self, data: str) -> None:
        if self._cell is not None:
            self._cell.append(data)


def _table_rows(text: str, within: str) -> list[list[str]]:
    parser = _Rows(within)
    parser.feed(text)
    return parser.rows


def _parse(text: str) -> _Page:
    p = _Page()
    p.feed(text)
    p.close()
    return p


def test_every_step_with_its_verdict_failed_first(made: dict[str, Path]) -> None:
    page = _parse(made["html"].read_text())
    ids = [i for i, _ in page.articles]
    assert ids == ["step-0", "step-2", "step-1", "step-3"]  # failed steps come first
    assert {i: "failed" in c for i, c in page.articles} == {
        "step-0": True, "step-1": False, "step-2": True, "step-3": False}
    assert page.verdict_of == {"step-0": "fail", "step-1": "pass", "step-2": "fail",
                               "step-3": "pass"}
    summary = " ".join(page.text["summary"].split())
    assert "4 steps: 2 \u2714 pass, 0 \u25b2 warn, 2 \u2718 fail." in summary
    assert "Failed: step 0, step 2." in summary
    # No tags: the overview is by direction (8 -> 10 -> 14 -> 11 -> 16: up, up, down, up),
    # the mean overshoot of each marked with the worst verdict on it (Ogata's closed form:
    # up 37.2, 4.6, 0.15 %: a failure among them; down 20.5 %, failed).
    assert "Overview by direction" in page.text["overview"]
    head, limits, up, down = _table_rows(made["html"].read_text(), "overview")
    assert head[:4] == ["group", "steps", "verdicts", "overshoot (%)"]
    assert limits[:4] == ["limit", "", "", "\u2264 10"]
    assert up[:3] == ["up", "0, 1, 3", "2 \u2714 pass, 1 \u2718 fail"]
    assert down[:3] == ["down", "2", "1 \u2718 fail"]
    mean_up = np.mean([_overshoot(z) for z in (0.3, 0.7, 0.9)])
    assert up[3].startswith("\u2718 ") and float(up[3][2:]) == pytest.approx(mean_up, abs=0.5)
    assert down[3].startswith("\u2718 ") and float(down[3][2:]) == pytest.approx(
        _overshoot(0.45), abs=0.5)
    # statistics per group (livestep.judge.statistics), in one folded table
    stats = " ".join(page.text["statistics"].split())
    for group in ("all steps", "direction up", "direction down"):
        assert group in stats, group
    # each failed step's table names the overshoot limit it broke
    for i in FAILING:
        assert "above the maximum 10 %" in page.text[f"step-{i}"]
    assert "above the maximum" not in page.text["step-1"]


def test_session_and_profile_facts(made: dict[str, Path]) -> None:
    page = _parse(made["html"].read_text())
    session = " ".join(page.text["session"].split())
    for fact in ("2026-11-30T09:15:02+00:00", "socket://bench-7:7000", "text, comma",
                 "15,000", "7.500 s", "2000 Hz", "4321, 15000", "2 (garbage: 2)",
                 "\u00b12 % of the amplitude"):
        assert fact in session, fact
    assert "overshoot gate" in page.text["profile"]


def test_inline_svgs_are_valid_and_ids_unique(made: dict[str, Path]) -> None:
    text = made["html"].read_text()
    svgs = re.findall(r"<svg\b.*?</svg>", text, flags=re.DOTALL)
    page = _parse(text)
    trends = text[text.index('id="trends"'):text.index('id="steps"')].count("<svg")
    assert trends >= 5 and len(svgs) == 4 + trends  # a plot per step and per metric
    for svg in svgs:
        assert ET.fromstring(svg).tag == "{http://www.w3.org/2000/svg}svg"
    assert len(page.ids) == len(set(page.ids))  # HTML and SVG ids together


def test_self_contained(made: dict[str, Path]) -> None:
    text = made["html"].read_text()
    page = _parse(text)
    assert "script" not in page.tags and "link" not in page.tags and "img" not in page.tags
    assert all(u.startswith("#") for u in page.urls)  # in-page links only
    assert not re.search(r"url\((?!#)", text) and "@import" not in text
    assert "default-src 'none'" in text  # and a browser would refuse anything else


def test_png_files(made: dict[str, Path]) -> None:
    names = sorted(p.name for p in made["png"].iterdir())
    assert names[:4] == ["step-000.png", "step-001.png", "step-002.png", "step-003.png"]
    assert "trend-overshoot_pct.png" in names and "trend-rise_time.png" in names
    for p in made["png"].iterdir():
        assert p.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


HOSTILE = "</p><script>alert('x')</script><!-- ]]> & \"quoted\" <b>"


def test_hostile_text_is_escaped(made: dict[str, Path], tmp_path: Path) -> None:
    rec = tmp_path / "<b>axis & co's \"run\".csv"
    shutil.copy(made["recording"], rec)
    reader = RecordingReader(rec)
    results = list(analyze_chunks(reader, AnalysisSettings()))  # no samples: no step plots
    results = [replace(r, tags=((HOSTILE, HOSTILE),)) for r in results]
    info = read_session_info(rec, metadata={"source": HOSTILE}, samples=reader.stats.good,
                             first_t=0.0, last_t=7.5)
    info = replace(info, counters={"bytes": HOSTILE, "bad": {HOSTILE: 1}},
                   states=(HOSTILE,), notes=(HOSTILE,))
    profile = parse_profile(f"name = '''{HOSTILE}'''\n[limits]\novershoot_pct = {{ max = 10 }}\n")
    out = write_report(tmp_path / "hostile.html", results, info, profile)
    text = out.read_text()
    assert HOSTILE not in text and "<script" not in text and "<b>" not in text
    page = _parse(text)
    assert "script" not in page.tags and "b" not in page.tags
    # the parser gives back the original text exactly: escaped, not mangled
    assert f"{HOSTILE}={HOSTILE}" in page.text["step-0"]
    assert HOSTILE in page.text["session"] and str(rec) in page.text["file"]
    assert HOSTILE in page.text["profile"]


def test_report_without_profile_or_steps(tmp_path: Path) -> None:
    rec = tmp_path / "flat.csv"
    rec.write_text("t,setpoint,feedback\n" + "".join(f"{k / 100},1,1\n" for k in range(300)))
    out = tmp_path / "flat.html"
    assert main(["report", str(rec), "-o", str(out)]) == 0
    page = _parse(out.read_text())
    assert page.articles == [] and "No step was found" in page.text["summary"]
    assert "not judged" in page.text["profile"]
    prof = tmp_path / "p.toml"
    prof.write_text(PROFILE)
    assert main(["report", str(rec), "-o", str(out), "--profile", str(prof),
                 "--png", str(tmp_path / "png")]) == 0
    assert "svg" not in _parse(out.read_text()).tags  # no empty trend plots
    assert list((tmp_path / "png").iterdir()) == []


def test_default_output_name_and_bad_input(made: dict[str, Path], tmp_path: Path,
                                           monkeypatch: pytest.MonkeyPatch,
                                           capsys: pytest.CaptureFixture[str]) -> None:
    monkeypatch.chdir(tmp_path)
    small = tmp_path / "short.csv.gz"
    small.write_bytes(__import__("gzip").compress(b"t,feedback\n0,1\n1,1\n"))
    assert main(["report", str(small)]) == 0
    assert (tmp_path / "short-report.html").is_file()
    capsys.readouterr()
    assert main(["report", str(tmp_path / "missing.csv")]) == 2
    assert main(["report", str(small), "--profile", str(tmp_path / "none.toml")]) == 2
    assert main(["report", str(small), "-o", str(tmp_path / "no" / "dir.html")]) == 2
    assert main(["report", str(small), "--png", str(small)]) == 2
    err = capsys.readouterr().err.splitlines()
    assert len(err) == 4 and all(line.startswith("livestep: error: ") for line in err)
    assert "Traceback" not in "".join(err)


def test_sections_in_order_and_statistics_folded(made: dict[str, Path]) -> None:
    text = made["html"].read_text()
    page = _parse(text)
    order = ["file", "summary", "overview", "trends", "steps", "statistics", "profile",
             "session"]
    assert [i for i in page.ids if i in order] == order
    stats = text[text.index('<section id="statistics">'):text.index('<section id="profile">')]
    # one table, inside a <details> element (opened by a click: the page has no script)
    assert stats.count("<table") == 1 and stats.count("<details>") == 1
    assert stats.index("<details>") < stats.index("<table") < stats.index("</details>")
    # Four steps are far fewer than the 30 Cpk and Cp need: each limited row says so.
    limited = [r for r in _table_rows(text, "statistics") if r[-3:-2] == ["\u2264 10"]]
    assert len(limited) >= 3  # overshoot: all steps, each direction, the size class
    assert all(r[-2:] == ["-", "not computed: n < 30"] for r in limited), limited


def test_the_file_is_named_once(made: dict[str, Path]) -> None:
    text = made["html"].read_text()
    body = text[text.index("<body>"):]
    assert body.count(html.escape(str(made["recording"]))) == 1
    assert str(made["recording"]) in _parse(text).text["file"]


WHEN_PROFILE = """name = "return moves"
[limits]
overshoot_pct = { max = 25, warn = 2 }
[[when]]
name = "down"
direction = "down"
[when.limits]
overshoot_pct = { max = 10 }
"""


def test_gain_sets_and_limits_that_change_between_steps(made: dict[str, Path],
                                                       tmp_path: Path) -> None:
    reader = RecordingReader(made["recording"])
    results = list(analyze_chunks(reader, AnalysisSettings(keep_windows=True)))
    gains = ("A", "A", "B", "B")  # steps 0, 1 under gain set A; 2, 3 under B
    results = [replace(r, tags=(("gains", g), ("kp", "20"))) for r, g in
               zip(results, gains, strict=True)]
    info = read_session_info(made["recording"], metadata={}, samples=reader.stats.good,
                             first_t=0.0, last_t=7.5)
    out = write_report(tmp_path / "gains.html", results, info, parse_profile(WHEN_PROFILE))
    text = out.read_text()
    page = _parse(text)
    assert "Overview by gain set (note gains)" in page.text["overview"]
    head, limits, a, b = _table_rows(text, "overview")
    # the shared tags of each gain set beside it; the limit starred: [[when]] changes it
    assert a[:2] == ["gains=A kp=20", "0, 1"] and b[:2] == ["gains=B kp=20", "2, 3"]
    assert limits[3] == "\u2264 25 *"
    # Over all steps the limits differ (the down step has its own): the table says why
    # there is no limit and no Cpk.
    rows = _table_rows(text, "statistics")
    every = next(r for r in rows if "overshoot (%)" in r and "all steps" in r)
    assert every[-3:] == ["per step ([[when]])", "-",
                          "not computed: limits differ between steps ([[when]])"]
    up = next(r for r in rows if r[0] == "direction up")
    assert up[-3:] == ["\u2264 25", "-", "not computed: n < 30"]
    # the profile's warning margin on a percentage is in percentage points
    assert "2 pp" in page.text["profile"]


CHROMIUM = shutil.which("chromium") or shutil.which("chromium-browser")


def _chromium(tmp_path: Path, *args: str) -> subprocess.CompletedProcess[str]:
    assert CHROMIUM is not None
    flags = [CHROMIUM, "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic",
             "--disable-background-networking", "--disable-component-update", "--disable-sync",
             "--no-first-run", f"--user-data-dir={tmp_path / 'profile'}"]
    return subprocess.run([*flags, *args], capture_output=True, text=True, timeout=120,
                          check=True)


@pytest.mark.skipif(CHROMIUM is None, reason="chromium is not installed (Debian: apt-get"
                    " install chromium; .ci/run installs it when it can): the page structure"
                    " is still checked by the html.parser and xml.etree tests above")
def test_renders_in_a_headless_browser(made: dict[str, Path], tmp_path: Path) -> None:
    url = made["html"].resolve().as_uri()
    dom = _chromium(tmp_path, "--dump-dom", url).stdout
    source_svgs = made["html"].read_text().count("<svg")
    assert dom.count("<svg") == source_svgs and dom.count("<article") == 4
    shot = tmp_path / "page.png"
    _chromium(tmp_path, f"--screenshot={shot}", "--window-size=1100,2400", url)
    from matplotlib.image import imread
    img = imread(shot)
    assert img.shape[0] == 2400 and img.shape[1] == 1100
    dark = (img[..., :3].mean(axis=2) < 0.5).mean(axis=1)  # dark pixels per row
    assert (dark > 0).mean() > 0.3  # text and plots down the page, not a blank render


#: The first screen of a laptop: the summary and the overview must be on it.
SCREEN = (1280, 800)
#: Added to a copy of the page (never to the report itself, whose policy forbids any
#: script): writes where each section's box starts and ends into the DOM, for --dump-dom.
_MEASURE = """<script>
for (const s of document.querySelectorAll("header, section")) {
  const r = s.getBoundingClientRect();
  s.setAttribute("data-box", r.top + " " + r.bottom + " " + r.right);
}
</script>"""


@pytest.mark.skipif(CHROMIUM is None, reason="chromium is not installed (Debian: apt-get"
                    " install chromium; .ci/run installs it when it can)")
def test_the_summary_and_overview_fill_the_first_screen(made: dict[str, Path],
                                                        tmp_path: Path) -> None:
    text = made["html"].read_text()
    csp = re.search(r'<meta http-equiv="Content-Security-Policy"[^>]*>', text)
    assert csp is not None
    probe = tmp_path / "probe.html"
    probe.write_text(text.replace(csp.group(0), "").replace("</body>", _MEASURE + "</body>"))
    size = f"--window-size={SCREEN[0]},{SCREEN[1]}"
    dom = _chromium(tmp_path, size, "--dump-dom", probe.resolve().as_uri()).stdout
    boxes = {m.group(1) or "header": tuple(map(float, m.group(2).split()))
             for m in re.finditer(r'<(?:header|section id="(\w+)")[^>]*data-box="([^"]+)"', dom)}
    assert list(boxes)[:4] == ["header", "summary", "overview", "trends"]
    for name in ("header", "summary", "overview"):
        top, bottom, right = boxes[name]
        assert 0 <= top < bottom <= SCREEN[1] and right <= SCREEN[0], (name, boxes[name])
    assert boxes["trends"][0] < SCREEN[1]  # and the trends begin on it
    # The report itself, as a browser shows it under its policy: the verdict badges and
    # the overview's failed cells (background #fbd5d5) are on the first screen.
    shot = tmp_path / "first.png"
    _chromium(tmp_path, size, f"--screenshot={shot}", made["html"].resolve().as_uri())
    from matplotlib.image import imread
    img = imread(shot)[..., :3]
    assert img.shape[:2] == (SCREEN[1], SCREEN[0])
    pink = np.all(np.abs(img - np.array([0xFB, 0xD5, 0xD5]) / 255) < 0.02, axis=2)
    rows = np.flatnonzero(pink.any(axis=1))
    assert rows.size and rows.min() < 250 and rows.max() < SCREEN[1]
    assert pink[:, :].sum() > 2000  # badges and cells, not a stray pixel
