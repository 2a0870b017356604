"""The project report: structure, embedded figures, offline use, print readability, Chromium rendering."""

from __future__ import annotations

import base64
import io
import json
import os
import re
import shutil
import subprocess
from html.parser import HTMLParser
from pathlib import Path

import matplotlib

matplotlib.use("Agg")

import numpy as np
import pytest
from matplotlib.text import Text
from PIL import Image

from arrayplan.cli import main
from arrayplan.formats.plan_folder import read_plan
from arrayplan.report import build_report, find_results
from arrayplan.report.figures import (MIN_FONT_PT, filter_figures, irset_figures, plan_figures, report_style,
                                      rig_figures, verification_figures)
from arrayplan.rig import load_rig
from arrayplan.safety import CAUTION_TEXT

# Invented fixture: a bench link of five small drivers facing six microphones 1.2 m away.
RIG_TOML = """
[rig]
name = "bench-link"

[medium]
speed_of_sound = 343.0

[frequencies]
start = 400.0
stop = 4000.0
count = 10
spacing = "log"

[[speakers]]
shape = "line"
name = "S"
count = 5
spacing = 0.09
center = [0.0, 0.0, 1.0]
direction = [1.0, 0.0, 0.0]

[[microphones]]
shape = "line"
name = "M"
count = 6
spacing = 0.08
center = [0.0, 1.2, 1.0]
direction = [1.0, 0.0, 0.0]
"""

#: Exit status of each step of the fixture's pipeline, by command.
EXIT_CODES: dict[str, int] = {}

VOID = {"area", "base", "br", "col", "embed", "hr", "img", "input", "link", "meta", "source", "track", "wbr"}


@pytest.fixture(scope="module")
def project(tmp_path_factory) -> Path:
    """plan -> filters -> simulated measurement -> verify, through the real CLI."""
    root = tmp_path_factory.mktemp("project")
    rig = root / "rig.toml"
    rig.write_text(RIG_TOML, encoding="utf-8")
    steps = [["plan", str(rig), "--out", str(root / "plan")],
             ["filters", str(rig), "--rate-hz", "16000", "--band-hz", "400", "4000", "--taps", "512", "--out",
              str(root / "filters")],
             ["measure", str(rig), "--out", str(root / "meas"), "--simulate", "--yes", "--rate-hz", "16000",
              "--duration-s", "0.5", "--f1-hz", "100", "--ir-length-s", "0.1", "--latency-samples", "0"],
             ["verify", str(root / "plan"), str(root / "meas" / "irset"), "--out", str(root / "verify")]]
    for argv in steps:
        EXIT_CODES[argv[0]] = main(argv)
        assert EXIT_CODES[argv[0]] in (0, 1), argv          # verify exits 1 when a channel is lost
    return root


@pytest.fixture(scope="module")
def report_html(project) -> str:
    assert main(["report", str(project)]) == 0
    return (project / "report.html").read_text(encoding="utf-8")


class _Collector(HTMLParser):
    """Checks nesting and collects tags, ids, links and image sources."""

    def __init__(self) -> None:
        super().__init__(convert_charrefs=True)
        self.stack: list[str] = []
        self.errors: list[str] = []
        self.tags: list[tuple[str, dict]] = []
        self.ids: list[str] = []

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        self.tags.append((tag, a))
        if "id" in a:
            self.ids.append(a["id"])
        if tag not in VOID:
            self.stack.append(tag)

    def handle_endtag(self, tag):
        if not self.stack or self.stack[-1] != tag:
            self.errors.append(f"</{tag}> closes {self.stack[-1] if self.stack else 'nothing'}")
        else:
            self.stack.pop()


def _parse(text: str) -> _Collector:
    p = _Collector()
    p.feed(text)
    p.close()
    return p


def test_report_parses_and_is_well_nested(report_html):
    # HTML5 element nesting (WHATWG HTML Living Standard): every non-void element closed in order.
    p = _parse(report_html)
    assert p.errors == [] and p.stack == []
    assert report_html.startswith("<!DOCTYPE html>")
    assert [t for t, _ in p.tags].count("h1") == 1
    assert len(p.ids) == len(set(p.ids)), "ids must be unique"
    for tag, a in p.tags:
        if tag == "a" and "href" in a:
            assert a["href"].startswith("#") and a["href"][1:] in p.ids, a["href"]


def test_report_is_self_contained(report_html):
    p = _parse(report_html)
    kinds = {t for t, _ in p.tags}
    assert not kinds & {"script", "link", "iframe", "object", "embed"}
    for tag, a in p.tags:
        for attr in ("src", "href"):
            if attr in a:
                assert a[attr].startswith(("data:", "#")), f"<{tag} {attr}={a[attr][:40]}>"
    assert "@import" not in report_html and "url(" not in report_html
    assert "http://" not in report_html and "https://" not in report_html


def test_every_embedded_image_decodes(report_html):
    p = _parse(report_html)
    imgs = [a for t, a in p.tags if t == "img"]
    assert len(imgs) >= 8      # rig, strengths, counts, levels, fields, crosstalk, IRs, isolation
    for a in imgs:
        assert a.get("alt"), "every figure has alt text"
        head, data = a["src"].split(",", 1)
        assert head == "data:image/png;base64"
        raw = base64.b64decode(data, validate=True)
        # PNG signature, ISO/IEC 15948:2004 (PNG specification), section 5.2
        assert raw[:8] == b"\x89PNG\r\n\x1a\n"
        with Image.open(io.BytesIO(raw)) as im:
            im.load()                                    # full decode, not just the header
            assert im.size[0] >= 600 and im.size[1] >= 150
            px = np.asarray(im.convert("L"), dtype=float)
            assert px.std() > 5.0, "figure is not blank"


def test_report_content_matches_results(project, report_html):
    rig = load_rig(project / "rig.toml")
    assert rig.sha256 in report_html                       # rig hash in the provenance
    assert CAUTION_TEXT.strip().splitlines()[0] in report_html
    from arrayplan import __version__
    assert f"arrayplan {__version__}" in report_html
    for sidecar in ("plan/weights.json", "filters/filters.json", "meas/irset/irset.json", "verify/verify.json"):
        written = json.loads((project / sidecar).read_text())["provenance"]["written_utc"]
        assert written in report_html, sidecar
    doc = json.loads((project / "verify" / "verify.json").read_text())
    assert report_html.count(">PASS<") == sum(doc["passed"])
    assert report_html.count(">FAIL<") == len(doc["passed"]) - sum(doc["passed"])
    for section in ("Plan: plan", "Filters: filters", "Impulse responses: meas/irset", "Verification: verify"):
        assert section in report_html


def _report_figures(project):
    res = find_results(project)
    figs = []
    with report_style():
        for fp in res.plans:
            figs += rig_figures(fp) + plan_figures(fp)
        for ff in res.filters:
            figs += filter_figures(ff)
        for fi in res.irsets:
            figs += irset_figures(fi)
        for fv in res.verifications:
            figs += verification_figures(fv)
    return figs


UNIT = re.compile(r"\(([^()]+)\)\s*$")
# Perceptually uniform maps: S. van der Walt & N. Smith, "A better default colormap for matplotlib",
# SciPy 2015 (viridis, magma, inferno, plasma); J. R. Nuñez et al., "Optimizing colormaps with
# consideration for color vision deficiency", PLoS ONE 13(7), 2018 (cividis).
UNIFORM = ("viridis", "cividis", "magma", "inferno", "plasma")


def test_every_figure_axis_is_labelled_with_a_unit(project):
    figs = _report_figures(project)
    assert len(figs) >= 8
    for rf in figs:
        for ax in rf.figure.axes:
            if not ax.get_visible():
                continue
            if hasattr(ax, "_colorbar"):
                cb = ax._colorbar
                label = cb.ax.get_ylabel() if cb.orientation == "vertical" else cb.ax.get_xlabel()
                assert UNIT.search(label), f"colour bar without unit in {rf.caption[:50]!r}: {label!r}"
                continue
            for label in (ax.get_xlabel(), ax.get_ylabel()):
                assert UNIT.search(label), f"axis label without unit in {rf.caption[:50]!r}: {label!r}"


def test_figures_are_readable_on_a4_and_use_uniform_colour_maps(project):
    # A4 is 210 mm wide; with 15 mm margins the text width is 180 mm = 7.09 in (ISO 216).
    for rf in _report_figures(project):
        fig = rf.figure
        width_in = fig.get_size_inches()[0]
        assert width_in <= 7.09 + 1e-9
        fig.canvas.draw()                     # lay out so every text has its final size
        for t in fig.findobj(Text):
            if t.get_visible() and t.get_text().strip():
                assert t.get_fontsize() >= MIN_FONT_PT, (rf.caption[:40], t.get_text(), t.get_fontsize())
        for artist in fig.findobj(lambda a: hasattr(a, "get_cmap") and hasattr(a, "get_array")):
            if artist.get_array() is None:
                continue
            assert artist.get_cmap().name.startswith(UNIFORM), (rf.caption[:40], artist.get_cmap().name)


def test_read_plan_keeps_the_sum_rule_of_the_green_function(project):
    # Sum rule ||G||_F^2 = sum s_j^2 (G. H. Golub & C. F. Van Loan, Matrix Computations, 4th ed., 2013,
    # section 2.4) with G = exp(-jkr)/(4 pi r) computed here with numpy, outside arrayplan's kernel.
    plan = read_plan(project / "plan")
    rig = load_rig(project / "rig.toml")
    r = np.linalg.norm(rig.mics.positions[:, None, :] - rig.speakers.positions[None, :, :], axis=2)
    for f, hz in enumerate(plan.channels.axis.hz):
        k = 2 * np.pi * hz / 343.0
        g = np.exp(-1j * k * r) / (4 * np.pi * r)
        assert np.sum(plan.channels.singular_values[f] ** 2) == pytest.approx(np.sum(np.abs(g) ** 2), rel=1e-9)


def test_a_result_that_cannot_be_read_is_listed_not_fatal(project, tmp_path):
    copy = tmp_path / "proj"
    shutil.copytree(project, copy)
    side = copy / "plan" / "weights.json"
    doc = json.loads(side.read_text())
    del doc["speaker_positions_m"]                        # as written by an older version
    doc["rig"]["source"] = "gone.toml"
    side.write_text(json.dumps(doc))
    (copy / "plan" / "SHA256SUMS").unlink()               # older versions wrote no checksums
    html = build_report(copy)
    assert "Results that could not be read" in html and "does not store element positions" in html
    assert "Verification: verify" in html


@pytest.mark.parametrize("argv, needle", [
    (["report", "{missing}"], "not a folder"),
    (["report", "{empty}"], "no arrayplan results found"),
    (["report", "{project}", "--out", "{project}/report.pdf"], "--out"),
    (["report", "{project}", "--rig", "{empty}/none.toml"], "none.toml"),
])
def test_bad_input_one_line_exit_2_nothing_written(project, tmp_path, capsys, argv, needle):
    empty = tmp_path / "empty"
    empty.mkdir()
    names = {"missing": str(tmp_path / "missing"), "empty": str(empty), "project": str(tmp_path / "p")}
    shutil.copytree(project, names["project"])
    (Path(names["project"]) / "report.html").unlink(missing_ok=True)
    before = sorted(p.name for p in Path(names["project"]).iterdir())
    code = main([a.format(**names) for a in argv])
    err = capsys.readouterr().err
    assert code == 2
    assert len(err.strip().splitlines()) == 1 and needle in err and "Traceback" not in err
    assert sorted(p.name for p in Path(names["project"]).iterdir()) == before
    assert list(empty.iterdir()) == []


CHROMIUM_FLAGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
                  "--disable-background-networking", "--disable-component-update", "--disable-sync",
                  "--hide-scrollbars"]


def _chromium() -> str:
    exe = shutil.which("chromium") or shutil.which("chromium-browser")
    if exe is None:
        reason = "Chromium is not installed (Debian package 'chromium'; bash .ci/run installs it)"
        if os.environ.get("CI"):
            pytest.fail(f"report rendering test cannot run in CI: {reason}")
        pytest.skip(f"report rendering test skipped: {reason}")
    return exe


def test_report_renders_in_headless_chromium(project, report_html, tmp_path):
    exe = _chromium()
    shot, pdf = tmp_path / "page.png", tmp_path / "page.pdf"
    url = (project / "report.html").resolve().as_uri()
    common = [exe, *CHROMIUM_FLAGS, f"--user-data-dir={tmp_path / 'profile'}"]
    subprocess.run([*common, "--window-size=1000,6000", f"--screenshot={shot}", url], check=True,
                   capture_output=True, timeout=180)
    with Image.open(shot) as im:
        assert im.size == (1000, 6000)
        px = np.asarray(im.convert("RGB"), dtype=float)
    assert px.std() > 20.0                                   # text, tables and figures, not a blank page
    # viridis/cividis figures put strongly coloured pixels on the page (plain text and tables are grey)
    chroma = px.max(axis=2) - px.min(axis=2)
    assert np.mean(chroma > 80) > 0.01
    subprocess.run([*common, "--no-pdf-header-footer", f"--print-to-pdf={pdf}", url], check=True,
                   capture_output=True, timeout=180)
    data = pdf.read_bytes()
    assert data[:5] == b"%PDF-"
    pages = len(re.findall(rb"/Type\s*/Page[^s]", data))
    assert pages >= 3
    # A4 in PDF points: 595 x 842 (ISO 216: 210 mm x 297 mm at 72 pt per inch)
    box = re.search(rb"/MediaBox\s*\[\s*0\s+0\s+([\d.]+)\s+([\d.]+)\s*\]", data)
    assert box and abs(float(box.group(1)) - 595.3) < 1.5 and abs(float(box.group(2)) - 841.9) < 1.5


def test_sofa_files_in_the_project_are_reported(project, tmp_path):
    copy = tmp_path / "proj"
    shutil.copytree(project, copy)
    (copy / "report.html").unlink(missing_ok=True)
    assert main(["irset", "convert", str(copy / "meas" / "irset"), str(copy / "meas" / "rig.sofa")]) == 0
    html = build_report(copy)
    assert "Impulse responses: meas/rig.sofa" in html and "AES69 (SOFA) file" in html
    p = _parse(html)
    assert p.errors == [] and len([t for t, _ in p.tags if t == "img"]) >= 9


def test_degenerate_channels_of_a_symmetric_rig_are_named(tmp_path):
    # Two identical square grids facing each other on a common axis: the rig is unchanged by a
    # quarter turn about that axis, so channels that are not themselves symmetric under the turn
    # come in pairs with equal singular values (the two-dimensional representations of the
    # group of rotations by 90 degrees; M. Tinkham, Group Theory and Quantum Mechanics, 1964).
    from arrayplan.frequency import FrequencyAxis
    from arrayplan.channels.planning import plan_rig
    from arrayplan.formats.plan_folder import write_plan
    from arrayplan.report.build import degenerate_pairs
    from arrayplan.rig import Rig

    g = np.array([(x, 0.0, z) for x in (-0.06, -0.02, 0.02, 0.06) for z in (-0.06, -0.02, 0.02, 0.06)])
    rig = Rig.from_positions(g, g + [0.0, 0.5, 0.0], speed_of_sound=343.0)
    plan = plan_rig(rig, FrequencyAxis([2000.0, 4000.0]))
    pairs = dict(degenerate_pairs(plan.channels.singular_values, plan.channels.level_db()))
    assert pairs.get((1, 2)) == 2                               # channels 2 and 3 at both frequencies
    s = plan.channels.singular_values
    assert np.allclose(s[:, 1], s[:, 2], rtol=1e-9)
    write_plan(plan, tmp_path / "plan", figures=False)
    html = build_report(tmp_path)
    assert "Degenerate channels" in html and "channels 2 and 3 at 2 of 2 frequencies" in html


def test_near_degenerate_pair_of_two_symmetric_zones_is_flagged(tmp_path):
    # Two speakers serving two seats, mirror-symmetric about the x = 0 plane: G = [[a, b], [b, a]]
    # is circulant, so its singular values are |a + b| and |a - b| (the sum and difference
    # channels; R. M. Gray, Toeplitz and Circulant Matrices: A Review, 2006).  With the seats far
    # apart the cross coupling b is small and the two channels lie well within 1 dB: the pair
    # that mixes first under placement errors.  a and b are computed here from exp(-jkr)/(4 pi r).
    from arrayplan.frequency import FrequencyAxis
    from arrayplan.channels.planning import plan_rig
    from arrayplan.formats.plan_folder import write_plan
    from arrayplan.report.build import degenerate_pairs
    from arrayplan.rig import Rig

    spk = np.array([[-3.0, 0.0, 1.2], [3.0, 0.0, 1.2]])
    mic = np.array([[-3.0, 0.3, 1.2], [3.0, 0.3, 1.2]])
    c, hz = 343.0, np.array([500.0, 1000.0, 2000.0])
    k = 2 * np.pi * hz / c
    r_direct, r_cross = 0.3, np.hypot(6.0, 0.3)
    a = np.exp(-1j * k * r_direct) / (4 * np.pi * r_direct)
    b = np.exp(-1j * k * r_cross) / (4 * np.pi * r_cross)
    gap_db = np.abs(20 * np.log10(np.abs(a + b) / np.abs(a - b)))
    assert np.all((gap_db > 0.01) & (gap_db < 1.0)), gap_db      # the case this test is about

    rig = Rig.from_positions(spk, mic, speed_of_sound=c)
    plan = plan_rig(rig, FrequencyAxis(hz))
    s = plan.channels.singular_values
    assert np.allclose(np.sort(s, axis=1), np.sort(np.c_[np.abs(a + b), np.abs(a - b)], axis=1), rtol=1e-9)
    assert degenerate_pairs(s, plan.channels.level_db()) == []                # not degenerate at 0.01 dB
    assert dict(degenerate_pairs(s, plan.channels.level_db(), 1.0)) == {(0, 1): 3}
    write_plan(plan, tmp_path / "plan", figures=False)
    html = build_report(tmp_path)
    assert "Near-degenerate channels" in html and "channels 1 and 2 at 3 of 3 frequencies" in html
    assert "Degenerate channels (" not in html


def _badges(html: str) -> list[tuple[str, str]]:
    """(status, href) of every line of the conclusions, in order."""
    block = html[html.index('id="summary"'):html.index("</section>", html.index('id="summary"'))]
    return re.findall(r'<li><span class="badge (\w+)">[^<]*</span> <a href="#([^"]+)">', block)


def _section(html: str, anchor: str) -> str:
    start = html.index(f'<section id="{anchor}">')
    return html[start:html.index("</section>", start)]


def test_report_opens_with_conclusions_then_contents_then_caution(report_html):
    p = _parse(report_html)
    order = [i for i in p.ids if i in ("summary", "contents", "caution")]
    assert order == ["summary", "contents", "caution"]
    first_result = min(report_html.index(f'<section id="{k}') for k in ("rig-", "plan-"))
    assert report_html.index('id="caution"') < first_result
    badges = _badges(report_html)
    # one line per result: plan, filters, IR set, verification (the rig has no verdict)
    assert sorted(a.split("-")[0] for _, a in badges) == ["filters", "irset", "plan", "verify"]
    nav = report_html[report_html.index('<nav id="contents">'):report_html.index("</nav>")]
    links = re.findall(r'href="#([^"]+)"', nav)
    for _, anchor in badges:                        # every result is in the contents and has its section
        assert anchor in links and anchor in p.ids
    assert {"summary", "caution", "provenance"} <= set(links)
    assert any(a.startswith("rig-") for a in links)


def test_each_result_has_one_verdict_by_the_commands_exit_rule(project, report_html):
    # The rule of the commands: exit 0 when every checked channel passes, 1 when some fail.
    badges = dict((a, st) for st, a in _badges(report_html))
    for anchor, status in badges.items():
        section = _section(report_html, anchor)
        opening = re.findall(r'<p class="verdict"><span class="badge (\w+)">', section)
        assert opening == [status], anchor          # the section repeats the one verdict, no other
    doc = json.loads((project / "verify" / "verify.json").read_text())
    verify_status = badges["verify-verify"]
    assert verify_status == ("pass" if EXIT_CODES["verify"] == 0 else "fail")
    assert verify_status == ("pass" if all(doc["passed"]) else "fail")
    assert f"verified on the rig: {sum(doc['passed'])} of {len(doc['passed'])} pass" in report_html
    check = json.loads((project / "filters" / "filters.json").read_text())["check"]
    n_pass, n = sum(check["passed"]), len(check["passed"])
    assert f"filters pass on {n_pass} of {n}" in report_html
    remedy = "Remedy: design them again with more taps (for example 1024 or 2048 instead of 512)"
    if n_pass < n:
        assert badges["filters-filters"] == "fail" and remedy in report_html
    else:
        assert badges["filters-filters"] == "pass" and remedy not in report_html
    assert badges["plan-plan"] == "info" and badges["irset-meas-irset"] == "info"   # nothing to pass or fail
    overall = re.search(r'<p class="overall">(\d+) of (\d+) checked results pass', report_html)
    statuses = list(badges.values())
    assert overall and int(overall.group(2)) == len([s for s in statuses if s != "info"])
    assert int(overall.group(1)) == statuses.count("pass")


def test_element_table_once_per_rig(project, tmp_path):
    copy = tmp_path / "proj"
    shutil.copytree(project, copy)
    (copy / "report.html").unlink(missing_ok=True)
    # a second plan of the same rig, and a plan of another rig (one speaker fewer)
    assert main(["plan", str(copy / "rig.toml"), "--out", str(copy / "plan-b"), "--snr-db", "30"]) == 0
    other = copy / "other.toml"
    other.write_text(RIG_TOML.replace('name = "bench-link"', 'name = "bench-link-4"').replace("count = 5", "count = 4"),
                     encoding="utf-8")
    assert main(["plan", str(other), "--out", str(copy / "plan-other")]) == 0
    html = build_report(copy)
    assert _parse(html).errors == []
    assert html.count("<h3>Elements</h3>") == 2
    hashes = {load_rig(copy / "rig.toml").sha256, load_rig(other).sha256}
    assert len(hashes) == 2
    for h in hashes:
        assert html.count(f'<section id="rig-{h[:16]}">') == 1
    same = f'href="#rig-{load_rig(copy / "rig.toml").sha256[:16]}"'
    for plan in ("plan", "plan-b"):
        assert same in _section(html, f"plan-{plan}")
    assert same not in _section(html, "plan-plan-other")


def test_print_rules_keep_captions_with_their_figures(report_html):
    # CSS Fragmentation Module Level 3 (W3C Candidate Recommendation, 2018): break-inside: avoid keeps
    # a box on one page; break-before / break-after: avoid forbid a page break at that edge.
    css = re.search(r"<style>(.*?)</style>", report_html, re.S).group(1)
    media = css[css.index("@media print"):]
    rules = {sel.strip(): body for sel, body in re.findall(r"([^{}]+)\{([^{}]*)\}", media.split("{", 1)[1])}

    def rule(selector: str) -> str:
        return next(body for sel, body in rules.items() if selector in [x.strip() for x in sel.split(",")])

    assert "break-inside: avoid" in rule("figure")
    assert "break-before: avoid" in rule("figcaption")
    assert "break-after: avoid" in rule("figure img")
    assert "break-after: avoid" in rule("h2") and "break-after: avoid" in rule("h3")
    # every caption sits inside its figure, right after the image
    assert report_html.count("<figcaption>") == report_html.count("<figure>")
    assert len(re.findall(r'<figure><img [^>]*><figcaption>', report_html)) == report_html.count("<figure>")


def test_one_centre_frequency_and_drive_effort_against_numpy(project, report_html):
    # The rig file plans 10 log-spaced frequencies from 400 Hz to 4 kHz; the centre is the one
    # nearest the geometric mean sqrt(400 * 4000) (common practice for a log band, no source).
    hz = np.geomspace(400.0, 4000.0, 10)
    f = int(np.argmin(np.abs(np.log(hz / np.sqrt(400.0 * 4000.0)))))
    note = report_html[report_html.index('id="centre"'):]
    note = note[:note.index("</p>")]
    assert f"plan plan: {hz[f]:.5g} Hz" in note and "geometric centre" in note
    plan = _section(report_html, "plan-plan")
    assert f"the centre ({hz[f]:.4g} Hz)" in plan and f"at {hz[f]:.4g} Hz" in plan    # couplings, field maps
    # Drive effort: unit-norm drive gives output s_j, so equal output takes 20 log10(s_max / s_j) dB more
    # drive (definition of the decibel for amplitude ratios).  s_j and |v_sj| from numpy's SVD of
    # G = exp(-jkr)/(4 pi r) computed here (D. A. B. Miller, Applied Optics 39(11), 2000).
    rig = load_rig(project / "rig.toml")
    r = np.linalg.norm(rig.mics.positions[:, None, :] - rig.speakers.positions[None, :, :], axis=2)
    k = 2 * np.pi * hz[f] / 343.0
    _, sv, vh = np.linalg.svd(np.exp(-1j * k * r) / (4 * np.pi * r))
    table_html = plan[plan.index("<h3>Drive effort per channel</h3>"):]
    table_html = table_html[:table_html.index("</table>")]
    rows = re.findall(r"<tr><td>(\d+)</td><td>([^<]+)</td><td>([^<]+)</td><td>([^<]+)</td></tr>", table_html)
    assert len(rows) == len(sv)
    for rank, (_chan, level, effort, loudest) in enumerate(rows):
        want = 20 * np.log10(sv[0] / sv[rank])
        if want > 60:                                    # numerical noise far below the plan's floor
            continue
        assert float(effort) == pytest.approx(want, abs=0.051)
        assert float(level) == pytest.approx(-want, abs=0.051)
        assert float(loudest) == pytest.approx(20 * np.log10(np.abs(vh[rank]).max()), abs=0.051)


def test_drive_effort_figure_and_a_channel_20_db_down():
    # 20 dB = a factor 10 in amplitude (definition of the decibel): a channel with a tenth of the
    # strongest one's singular value needs 20 dB more drive for the same output.
    from arrayplan.frequency import FrequencyAxis
    from arrayplan.channels.planning import plan_rig
    from arrayplan.plots.effort import drive_effort_db, plot_drive_effort
    from arrayplan.rig import Rig

    assert drive_effort_db(np.array([[2.0, 0.2, 0.02]])) == pytest.approx(np.array([[0.0, 20.0, 40.0]]))
    spk = np.array([[x, 0.0, 0.0] for x in (-0.2, 0.0, 0.2)])
    rig = Rig.from_positions(spk, spk + [0.0, 1.0, 0.0], speed_of_sound=343.0)
    plan = plan_rig(rig, FrequencyAxis([500.0, 1000.0, 2000.0]))
    fig = plot_drive_effort(plan)
    ax = fig.axes[0]
    assert UNIT.search(ax.get_xlabel()) and UNIT.search(ax.get_ylabel())
    drawn = np.array([line.get_ydata() for line in ax.get_lines()[:3]])     # channels, strongest first
    s = np.sort(plan.channels.singular_values, axis=1)[:, ::-1]
    want = np.minimum(20 * np.log10(s[:, :1] / s), abs(plan.snr_db) + 10).T
    assert drawn == pytest.approx(want, abs=1e-9)


def test_plan_weights_are_mapped_lazily_and_equal_numpys_reading(project, tmp_path):
    # Reference: numpy's own np.load of the same members (ZIP layout: PKWARE APPNOTE.TXT, section 4.3.7).
    from arrayplan.report.discover import _mapped_npz

    npz = project / "plan" / "weights.npz"
    mapped = _mapped_npz(npz, ("drive", "combine", "singular_value"))
    with np.load(npz) as z:
        for key, arr in mapped.items():
            assert isinstance(arr, np.memmap) and not arr.flags.writeable
            assert arr.dtype == z[key].dtype and np.array_equal(arr, z[key]), key
    # a compressed archive (invented fixture data, Fortran order too) is read in full instead
    rng = np.random.default_rng(3)
    a = rng.standard_normal((4, 3, 2)) + 1j * rng.standard_normal((4, 3, 2))
    np.savez_compressed(tmp_path / "c.npz", a=a)
    np.savez(tmp_path / "f.npz", a=np.asfortranarray(a))
    assert np.array_equal(_mapped_npz(tmp_path / "c.npz", ("a",))["a"], np.load(tmp_path / "c.npz")["a"])
    fortran = _mapped_npz(tmp_path / "f.npz", ("a",))["a"]
    assert isinstance(fortran, np.memmap) and np.array_equal(fortran, np.load(tmp_path / "f.npz")["a"])


def test_a_plan_folder_reported_on_its_own_is_named_by_its_folder(tmp_path):
    # common practice, no source: a result is named by its folder, never by "." (the report's own folder)
    from arrayplan.frequency import FrequencyAxis
    from arrayplan.channels.planning import plan_rig
    from arrayplan.formats.plan_folder import write_plan
    from arrayplan.rig import Rig

    pts = np.array([[x, 0.0, 0.0] for x in (-0.1, 0.0, 0.1)])
    rig = Rig.from_positions(pts, pts + [0.0, 1.0, 0.0], speed_of_sound=343.0)
    write_plan(plan_rig(rig, FrequencyAxis([1000.0, 2000.0])), tmp_path / "lone-plan", figures=False)
    html = build_report(tmp_path / "lone-plan")
    assert "Plan: lone-plan" in html and "Plan: .<" not in html and "Plan: .:" not in html


def test_a_filter_verification_names_the_filters_and_their_plan(project, tmp_path):
    # A verification of a filter set records filters_dir, not plan_dir: its section must name the
    # filters folder and the plan the filters were designed from, never an empty "plan" field.
    copy = tmp_path / "proj"
    shutil.copytree(project, copy)
    (copy / "report.html").unlink(missing_ok=True)
    assert main(["filters", str(copy / "plan"), "--rate-hz", "16000", "--band-hz", "400", "4000", "--taps", "512",
                 "--out", str(copy / "plan-filters")]) in (0, 1)
    status = main(["verify", str(copy / "plan-filters"), str(copy / "meas" / "irset"), "--out",
                   str(copy / "verify-filters")])
    assert status in (0, 1)
    doc = json.loads((copy / "verify-filters" / "verify.json").read_text())
    assert "filters_dir" in doc and "plan_dir" not in doc          # what the verify command records
    section = _section(build_report(copy), "verify-verify-filters")
    rows = dict(re.findall(r'<tr><td class="text">([^<]*)</td><td class="text">([^<]*)</td></tr>', section))
    assert rows["filters"] == str(copy / "plan-filters")
    assert rows["plan the filters were designed from"] == str(copy / "plan")
    assert "plan" not in rows or rows["plan"].strip()
    if status == 1:      # free-field filters lost a channel: the remedy is to plan from the measurement
        assert "plan again from these measured responses" in section


def test_report_drawn_by_workers_equals_the_report_drawn_here(project):
    # The same page whichever process draws the figures (only the generation time may differ).
    import threading
    from arrayplan.report.render import report_workers
    assert report_workers(8, 2) == 2 or threading.active_count() > 1      # workers really are used here
    stamp = re.compile(r"\d{4}-\d\d-\d\dT\d\d:\d\d:\d\d\+00:00")
    here = stamp.sub("T", build_report(project, workers=1))
    spread = stamp.sub("T", build_report(project, workers=2))
    assert here.count("<img ") >= 8
    assert spread == here


def test_png_bytes_has_the_pixels_of_savefig(project):
    # Reference: matplotlib's own savefig of the same figure, laid out the same way.
    from arrayplan.report.figures import png_bytes
    with report_style():
        ours = Image.open(io.BytesIO(png_bytes(plan_figures(find_results(project).plans[0])[0].figure)))
        fig = plan_figures(find_results(project).plans[0])[0].figure
        buf = io.BytesIO()
        fig.savefig(buf, format="png", dpi=150)
    theirs = Image.open(io.BytesIO(buf.getvalue()))
    assert ours.size == theirs.size and ours.info.get("dpi", (0,))[0] == pytest.approx(150, abs=0.05)   # pHYs is in pixels per metre
    np.testing.assert_array_equal(np.asarray(ours.convert("RGBA")), np.asarray(theirs.convert("RGBA")))


def test_verification_table_read_by_column_equals_the_csv_module(project, tmp_path):
    # Reference: Python's csv.DictReader, cell by cell (empty cell = NaN).
    import csv
    from arrayplan.errors import InputError
    from arrayplan.report.discover import _read_csv_columns
    path = project / "verify" / "verify-channels.csv"
    with open(path, newline="") as fh:
        rows = list(csv.DictReader(fh))
    cols = _read_csv_columns(path)
    assert set(cols) == set(rows[0])
    for key, values in cols.items():
        ref = np.array([float(r[key]) if r[key] != "" else np.nan for r in rows])
        np.testing.assert_array_equal(values, ref)
    gaps = tmp_path / "gaps.csv"
    gaps.write_text("a,b,c\n,1,\n2,,3\n", encoding="utf-8")
    got = _read_csv_columns(gaps)
    np.testing.assert_array_equal(np.column_stack([got["a"], got["b"], got["c"]]),
                                  [[np.nan, 1.0, np.nan], [2.0, np.nan, 3.0]])
    bad = tmp_path / "bad.csv"
    bad.write_text("a,b\n1,2\n3,oops\n", encoding="utf-8")
    with pytest.raises(InputError, match="bad.csv.*b.*not a number"):
        _read_csv_columns(bad)
    bad.write_text("a,b\n1,2\n3\n", encoding="utf-8")
    with pytest.raises(InputError, match="line 3"):
        _read_csv_columns(bad)


def test_field_maps_of_several_channels_equal_the_free_field_sum(project):
    # Reference: p(x) = sum_s w_s exp(-j k r_s) / (4 pi r_s), the free-field Green's function
    # (D. A. B. Miller, Applied Optics 39(11), 2000; DSP sign convention), summed here with numpy.
    from arrayplan.channels.field import channel_field, channel_fields, default_plane
    rig = load_rig(project / "rig.toml")
    grid = default_plane(rig, "xy", resolution=15)
    rng = np.random.default_rng(5)
    w = rng.standard_normal((len(rig.speakers), 3)) + 1j * rng.standard_normal((len(rig.speakers), 3))
    hz = 1500.0
    k = 2 * np.pi * hz / rig.medium.speed_of_sound
    pts = grid.points()
    r = np.linalg.norm(pts[:, None, :] - rig.speakers.positions[None, :, :], axis=2)
    ref = (np.exp(-1j * k * r) / (4 * np.pi * r)) @ w                      # (n_points, 3)
    got = channel_fields(rig, w, hz, grid)
    assert got.shape == (3, len(grid.v), len(grid.u))
    for j in range(3):
        np.testing.assert_allclose(got[j].reshape(-1), ref[:, j], rtol=1e-9)
        np.testing.assert_allclose(channel_field(rig, w[:, j], hz, grid), got[j], rtol=1e-12)
