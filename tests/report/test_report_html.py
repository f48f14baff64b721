"""The HTML report: one self-contained file with every plot, no external URL, and it renders
in a real browser (headless Chromium) with every image decoded."""

from __future__ import annotations

import base64
import dataclasses
import html as html_lib
import re
import shutil
import struct
import subprocess
from pathlib import Path

import pytest

from sweeprig.analysis.figures import FLAG_MEANINGS, FLAGS, SUSPECT_FLAGS
from sweeprig.report.html import render_html
from sweeprig.report.tables import summary_rows

PLOT_KEYS = ("gain_vs_frequency", "compression", "two_tone", "intermod_dbc", "lo_drive",
             "isolation", "spurs")
PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"  # PNG specification (ISO/IEC 15948), file signature


def _png_size(data: bytes) -> tuple[int, int]:
    """Width and height from the IHDR chunk, the first chunk after the signature (PNG
    specification: 4-byte length, "IHDR", then width and height as big-endian uint32)."""
    assert data[:8] == PNG_SIGNATURE and data[12:16] == b"IHDR"
    return struct.unpack(">II", data[16:24])


def test_the_report_is_one_file_with_every_plot(report_files):
    html = report_files.html.read_text(encoding="utf-8")
    assert report_files.html.name == "report.html"
    for key in PLOT_KEYS:
        assert f'id="plot-{key}"' in html, key
    images = re.findall(r'<img [^>]*src="data:image/png;base64,([^"]+)"[^>]*>', html)
    assert len(images) == len(PLOT_KEYS)
    sizes = re.findall(r'<img [^>]*width="(\d+)" height="(\d+)"', html)
    for data, (width, height) in zip(images, sizes, strict=True):
        assert _png_size(base64.b64decode(data)) == (int(width), int(height))


def test_the_report_refers_to_nothing_outside_itself(report_files):
    html = report_files.html.read_text(encoding="utf-8")
    assert not re.search(r"https?://|ftp://|file:|www\.", html, re.IGNORECASE)
    for attribute in re.findall(r'\b(?:src|href|action|poster)\s*=\s*"([^"]*)"', html):
        assert attribute.startswith(("data:", "#")), attribute
    assert "<script" not in html and "<link" not in html and "<iframe" not in html
    assert "@import" not in html and "url(" not in html


def test_the_header_and_sections_say_what_an_engineer_needs(report_run, report_files):
    html = report_files.html.read_text(encoding="utf-8")
    for text in ("KX-2417", "T-0001", "Report test: KX-2417 (fictional)",
                 f"run <b>{report_run.run_id} (simulated bench)</b>", ">complete<", ">PASS<",
                 "Summary", "Conditions", "Instruments", "*IDN?", "Tarnwick Labs",
                 report_run.sequence_sha256, "bench time", "wall time", "Events"):
        assert text in html, text
    # bounds keep their sign, badges explain themselves
    assert "&gt; " in html  # e.g. saturated output "> 5.6 dBm" (not saturated)
    assert re.search(r'<span class="badge[^"]*" title="not_saturated: [^"]+">', html)


def test_partial_runs_and_hostile_text_are_shown_safely(report_run, report_plots):
    plots = report_plots[:1]
    aborted = dataclasses.replace(report_run, state="aborted", reason="stopped by SIGINT",
                                  verdict="inconclusive", title="<b>bold</b> & co")
    html = render_html(aborted, summary_rows(aborted), plots)
    assert ">aborted<" in html and "stopped by SIGINT" in html and ">INCONCLUSIVE<" in html
    assert "&lt;b&gt;bold&lt;/b&gt; &amp; co" in html and "<b>bold</b>" not in html


def test_every_flag_is_explained_in_words_beside_its_figure(report_run, report_plots):
    # one figure carrying every flag: each meaning is page text (outside any attribute), once
    # beside the figure and once in the legend, which also says which flags are suspect
    figure = dataclasses.replace(report_run.figures[0], flags=FLAGS)
    flagged = dataclasses.replace(report_run, figures=(figure, *report_run.figures[1:]))
    page = render_html(flagged, summary_rows(flagged), report_plots[:1])
    text = re.sub(r'"[^"]*"', '""', page)  # attribute values removed: tooltips do not count
    for name in FLAGS:
        meaning = html_lib.escape(FLAG_MEANINGS[name])
        assert text.count(meaning) >= 2, name
    assert 'id="flags"' in page and "What the flags mean" in page
    legend = page[page.index('id="flags"'):]
    for name in SUSPECT_FLAGS:
        entry = legend[legend.index(f"<code>{name}</code>"):]
        assert entry[:entry.index("</dd>")].endswith("inconclusive."), name


def _chromium() -> str | None:
    for name in ("chromium", "chromium-browser"):
        found = shutil.which(name)
        if found:
            return found
    return "/usr/bin/chromium" if Path("/usr/bin/chromium").exists() else None


#: Chromium flags for a quiet, isolated headless run (no network, no first-run dialogs).
CHROMIUM_FLAGS = ("--headless", "--no-sandbox", "--disable-gpu", "--disable-quic",
                  "--no-first-run", "--disable-background-networking",
                  "--disable-component-update", "--disable-sync")
#: The printable width of an A4 page with the report's 11 mm side margins, in CSS pixels
#: (96 px per inch: (210 − 22) mm / 25.4 × 96 ≈ 710 px). The screen styles are larger than
#: the print ones, so a table that fits at this width fits on paper.
A4_PRINT_WIDTH_PX = 710

#: Probe inserted at the top of <head> of a copy of the report (the report has no script):
#: records errors as they happen, then on load what a reader would see.
_PROBE = """<script>
window.__errors = [];
addEventListener('error', e => window.__errors.push(String(e.message || (e.target && (
  e.target.src || e.target.tagName)) || 'error').slice(0, 80)), true);
const __err = console.error; console.error = (...a) => { window.__errors.push(a.join(' '));
  __err(...a); };
addEventListener('load', () => {
  const b = document.body, main = document.querySelector('main');
  b.setAttribute('data-errors', window.__errors.join(' | '));
  b.setAttribute('data-images', Array.from(document.images).map(i => {
    const r = i.getBoundingClientRect();
    return (i.complete && i.naturalWidth > 0 && r.width > 0 && r.height > 0) ?
      i.naturalWidth + 'x' + i.naturalHeight : '0x0'; }).join(' '));
  b.setAttribute('data-figures', Array.from(document.querySelectorAll('figure')).map(
    f => f.id + '=' + (f.getAttribute('data-corners') || '').split(' ; ').filter(
      c => c).length).join(' '));
  b.setAttribute('data-order', Array.from(main.children).map(
    el => el.tagName.toLowerCase() + '.' + (el.className || '')).slice(0, 3).join(' '));
  const table = document.querySelector('table.datasheet');
  b.setAttribute('data-table-top', Math.round(table.getBoundingClientRect().top));
  b.setAttribute('data-viewport', innerHeight + 'x' + innerWidth);
  const cells = Array.from(table.querySelectorAll('td, th')).filter(
    c => c.scrollWidth > c.clientWidth + 1).map(c => c.textContent.slice(0, 30));
  b.setAttribute('data-clipped', (table.scrollWidth > table.parentElement.clientWidth + 1 ?
    'table ' : '') + cells.join(' | '));
  b.setAttribute('data-meanings', Array.from(document.querySelectorAll(
    '.flag .meaning, dl.flags dd')).filter(el => el.getBoundingClientRect().height > 0
    && getComputedStyle(el).visibility === 'visible').map(el => el.innerText).join(' | '));
});
</script>"""


def _run_chromium(browser: str, profile: Path, *args: str) -> subprocess.CompletedProcess:
    return subprocess.run([browser, *CHROMIUM_FLAGS, f"--user-data-dir={profile}", *args],
                          capture_output=True, text=True, timeout=90, check=False)


def test_the_report_renders_in_headless_chromium(report_run, report_plots, report_files,
                                                 tmp_path):
    browser = _chromium()
    if browser is None:
        pytest.skip("Chromium is not installed (Debian: apt-get install chromium); CI has it")
    page = tmp_path / "probe.html"
    page.write_text(report_files.html.read_text(encoding="utf-8").replace(
        "<head>", "<head>" + _PROBE, 1), encoding="utf-8")
    # the width of an A4 page's print area, an A4 page's height at 96 px per inch
    result = _run_chromium(browser, tmp_path / "profile", "--dump-dom",
                           f"--window-size={A4_PRINT_WIDTH_PX},1123", page.as_uri())
    assert result.returncode == 0, result.stderr[-2000:]

    def attribute(name: str) -> str:
        found = re.search(rf'data-{name}="([^"]*)"', result.stdout)
        assert found, f"the page did not finish loading ({name})"
        return html_lib.unescape(found.group(1))

    assert attribute("errors") == ""  # no script error, no image that failed to load
    assert "Uncaught" not in result.stderr
    sizes = attribute("images").split()
    assert len(sizes) == len(PLOT_KEYS) == len(report_plots)
    for size in sizes:  # every image decoded and laid out on the page
        width, height = (int(v) for v in size.split("x"))
        assert width > 300 and height > 200, size
    # no plot dropped: every figure lists the corners it drew, as many as the run has
    shown = dict(item.split("=") for item in attribute("figures").split())
    for plot in report_plots:
        assert int(shown[f"plot-{plot.key}"]) == len(plot.corners) > 0, plot.key
    # the report opens on the datasheet table, in the first screen
    assert attribute("order").split()[:2] == ["header.run", "section.datasheet"]
    assert 0 < int(attribute("table-top")) < 400
    assert attribute("clipped") == ""  # no column wider than the A4 print width
    shown = attribute("meanings")
    assert FLAG_MEANINGS["not_saturated"] in shown  # spelled out under the table


def test_the_report_screenshot_shows_the_table_first(report_files, tmp_path):
    browser = _chromium()
    if browser is None:
        pytest.skip("Chromium is not installed (Debian: apt-get install chromium); CI has it")
    shot = tmp_path / "report.png"
    result = _run_chromium(browser, tmp_path / "profile", f"--screenshot={shot}",
                           "--window-size=1100,1400", "--hide-scrollbars",
                           report_files.html.as_uri())
    assert result.returncode == 0 and shot.exists(), result.stderr[-2000:]
    width, height = _png_size(shot.read_bytes())
    assert (width, height) == (1100, 1400)
    assert shot.stat().st_size > 50_000  # a page of text and rules, not a blank canvas


def pdf_page_count(data: bytes) -> int:
    """Pages of a PDF: the page objects (``/Type /Page``, not ``/Pages``) of an uncompressed
    page tree, as Chromium writes it (ISO 32000-1, 7.7.3.3: a page object's /Type is /Page)."""
    return len(re.findall(rb"/Type\s*/Page(?![a-zA-Z])", data))


def test_the_table_prints_on_at_most_two_a4_pages_with_no_clipped_column(report_files,
                                                                        tmp_path):
    browser = _chromium()
    if browser is None:
        pytest.skip("Chromium is not installed (Debian: apt-get install chromium); CI has it")
    text = report_files.html.read_text(encoding="utf-8")
    # the datasheet part of the report: everything before the plots, as printed (A4, the
    # report's own @page rule)
    page = tmp_path / "datasheet.html"
    page.write_text(text[:text.index('<section class="plots">')] + "</main></body></html>",
                    encoding="utf-8")
    pdf = tmp_path / "datasheet.pdf"
    result = _run_chromium(browser, tmp_path / "profile", f"--print-to-pdf={pdf}",
                           "--no-pdf-header-footer", page.as_uri())
    assert result.returncode == 0 and pdf.exists(), result.stderr[-2000:]
    data = pdf.read_bytes()
    assert data.startswith(b"%PDF-")
    assert 1 <= pdf_page_count(data) <= 2
    # A4 media box: 595 × 842 pt (ISO 216, 210 × 297 mm at 72 pt per inch)
    box = re.search(rb"/MediaBox\s*\[\s*0\s+0\s+([\d.]+)\s+([\d.]+)\s*\]", data)
    assert box and abs(float(box.group(1)) - 595.3) < 1 and abs(float(box.group(2)) - 841.9) < 1


def test_the_report_shows_each_figure_with_its_uncertainty_and_budget(report_run,
                                                                         report_files):
    from sweeprig.report.budgets import widest_budgets

    page = report_files.html.read_text(encoding="utf-8")
    assert "(k = 2)</td>" in page  # summary values carry "± U unit (k = 2)"
    assert "<h2>Uncertainty</h2>" in page and "JCGM 100:2008" in page
    widest = widest_budgets(report_run)
    assert widest and widest[0].name == "conversion_gain"
    assert f"<b>{widest[0].budget.expanded_db:.3f}</b>" in page
    assert "default (assumption" in page  # defaults say they are assumptions


def test_the_budget_section_shows_every_line_of_the_whole_budget(report_run, report_files):
    """The HTML budget section shows, for each widest figure, the lines of its whole budget
    as the per-figure path of earlier versions made them (its shared lines and its own noise
    lines, put back together: the same names, texts and numbers, in the same order) and its
    u_c and U (tests/analysis/test_uncertainty_groups.py's reference)."""

    from pathlib import Path

    from sweeprig.analysis.bench_specs import calibration_state, specs_from_bench_text
    from sweeprig.analysis.uncertainty import PointLevels, small_signal_gain_u
    from sweeprig.report.budgets import budget_section, widest_budgets
    from tests.analysis.test_uncertainty_groups import reference_budget

    section = budget_section(report_run)
    assert section in report_files.html.read_text(encoding="utf-8")
    assert report_run.bench_path is not None
    bench = Path(report_run.bench_path)
    specs = specs_from_bench_text(bench.read_text(encoding="utf-8"), str(bench)).specs
    cal = calibration_state(report_run.events)[0]
    levels = PointLevels.from_captures(report_run.captures)
    small_signal_u = small_signal_gain_u(report_run.figures, levels)
    tables = section.split("<h3>")[1:]
    shown = 0
    for figure, table in zip(widest_budgets(report_run), tables, strict=True):
        want = reference_budget(figure, levels, specs, cal, small_signal_u)
        if want is None:  # a headline worse-of-two-sides figure: its side's budget
            continue
        rows = re.findall(r"<tr><td>(.*?)</td><td>(.*?)</td><td class=\"num\">± (.*?)</td>"
                          r"<td>(.*?)</td><td class=\"num\">(.*?)</td><td class=\"num\">(.*?)"
                          r"</td><td class=\"num\">(.*?)</td><td>(.*?)</td>", table)
        assert rows == [(html_lib.escape(c.name), html_lib.escape(c.what),
                         f"{c.half_width_db:.3f}", html_lib.escape(c.shape),
                         f"{c.standard_db:.3f}", f"{c.sensitivity:g}",
                         f"{c.contribution_db:.3f}", c.kind)
                        for c in want.contributions], figure.name
        assert f'<td class="num">{want.combined_db:.3f}</td>' in table
        assert f"<b>{want.expanded_db:.3f}</b>" in table
        shown += 1
    assert shown >= 3
