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


def test_the_report_renders_in_headless_chromium(report_files, tmp_path):
    browser = _chromium()
    if browser is None:
        pytest.skip("Chromium is not installed (Debian: apt-get install chromium); CI has it")
    # A copy with a probe that lists every image's decoded size once the page has loaded;
    # the report itself carries no script.
    # ...and the rendered text of every flag meaning that takes up room on the page (words
    # a reader sees, not a tooltip)
    probe = (
        "<script>addEventListener('load', () => { document.body.setAttribute('data-images', "
        "Array.from(document.images).map(i => (i.complete && i.naturalWidth > 0) ? "
        "i.naturalWidth + 'x' + i.naturalHeight : '0x0').join(' ')); "
        "document.body.setAttribute('data-meanings', Array.from(document.querySelectorAll("
        "'.flag .meaning, dl.flags dd')).filter(el => el.getBoundingClientRect().height > 0 "
        "&& getComputedStyle(el).visibility === 'visible').map(el => el.innerText)"
        ".join(' | ')); });</script>"
    )
    page = tmp_path / "probe.html"
    page.write_text(report_files.html.read_text(encoding="utf-8").replace(
        "</body>", probe + "</body>"), encoding="utf-8")
    result = subprocess.run(
        [browser, "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic",
         "--no-first-run", "--disable-background-networking", "--disable-component-update",
         "--disable-sync", f"--user-data-dir={tmp_path / 'profile'}", "--dump-dom",
         page.as_uri()],
        capture_output=True, text=True, timeout=90, check=False,
    )
    assert result.returncode == 0, result.stderr[-2000:]
    found = re.search(r'data-images="([^"]*)"', result.stdout)
    assert found, "the page did not finish loading"
    sizes = found.group(1).split()
    assert len(sizes) == len(PLOT_KEYS)
    for size in sizes:
        width, height = (int(v) for v in size.split("x"))
        assert width > 300 and height > 200, size
    meanings = re.search(r'data-meanings="([^"]*)"', result.stdout)
    assert meanings, "no flag meaning is shown as text"
    shown = html_lib.unescape(meanings.group(1))
    assert FLAG_MEANINGS["not_saturated"] in shown  # beside the flagged figure and in the legend


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
