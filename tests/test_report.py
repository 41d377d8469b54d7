"""The HTML report: structure, numbers equal to the result, escaping, self-containment, and a real browser."""
import json
import os
import re

import pytest

from conftest import AL_BACK

from optimiser import report
from optimiser.analysis import analyse
from optimiser.report import FIGURES, SECTIONS, fmt
from optimiser.report.text import signed_fixed
from optimiser.results import dumps, to_json
from optimiser.scenario import parse
from optimiser.search import run_search

HOSTILE = """
name: "<script>alert(1)</script>"
description: "Calcium <b>bold</b> & <img src=x onerror=alert(2)>"
sample: {volume: 50 mL, matrix: "<iframe src=javascript:alert(3)>"}
analyte: {metals: {Ca: 1.0 mmol/L}}
interferents: {Mg: 0.8 mmol/L}
titrant: {concentration: 0.01 M}
search:
  pH: [9.0, 13.0]
  titrants: [EDTA, EGTA]
  buffers: [ammonia, NaOH]
  indicators: [EBT, calcon_carboxylic, murexide]
  max_masking_agents: 1
  masking: [TEA]
"""


@pytest.fixture(scope="module")
def result():
    return run_search(parse(HOSTILE, "hostile.yaml"), seed=2, pop_size=20, n_gen=8)


@pytest.fixture(scope="module")
def written(result, tmp_path_factory):
    out = tmp_path_factory.mktemp("report")
    html_path, json_path = report.write(result, out, dumps(to_json(result)))
    return html_path, json_path


def test_every_section_and_figure_is_present(written):
    html = written[0].read_text()
    for s in SECTIONS:
        assert f'<section id="{s}">' in html, s
    for f in FIGURES:
        assert re.search(rf'<figure id="{f}">\s*<svg', html), f
    assert html.count("<svg") == len(FIGURES)


def test_summary_numbers_equal_the_result(written, result):
    html = written[0].read_text()
    t = result.recommended_titration
    assert f'<b id="endpoint-mL">{fmt(t.endpoint_mL, 4)} mL</b>' in html
    assert f'<b id="error-percent">{signed_fixed(t.standardised_error_percent)} %</b>' in html  # to 0.001 %
    assert f"({signed_fixed(t.error_percent)} % before)" in html
    doc = json.loads(written[1].read_text())
    rec = doc["recommended"] if result.meets_criteria else doc["closest_compromise"]
    assert (doc["recommended"] is None) == (not result.meets_criteria)
    assert rec["pH"] == pytest.approx(result.recommended.candidate.pH, abs=1e-3)
    assert rec["predicted_error_percent"] == pytest.approx(t.error_percent, abs=1e-4)
    assert sum(rec["error_budget"].values()) == pytest.approx(t.error_percent, abs=1e-3)
    # the causes added by magnitude beside the net error: never less than it, and shown in the headline and JSON
    assert rec["error_by_cause_percent"] == pytest.approx(t.error_by_cause_percent, abs=1e-4)  # JSON keeps 4 decimals
    assert t.error_by_cause_percent >= abs(t.standardised_error_percent) - 1e-9
    assert f"its causes added by magnitude {t.error_by_cause_percent:.2f} %" in html
    assert f"pH {result.recommended.candidate.pH:.2f}<" in html  # the headline pH to 0.01, as the procedure gives it


def test_mass_balance_check_is_reported(written, result):
    html = written[0].read_text(encoding="utf-8")
    shown = float(re.search(r'<span id="mass-balance">([^<]+)</span>', html).group(1))
    assert shown == pytest.approx(result.recommended_titration.mass_balance_error, rel=0.06) and shown <= 1.0001e-10


def test_scenario_text_is_escaped(written):
    html = written[0].read_text()
    assert "<script>" not in html and "<img src=x" not in html and "<iframe" not in html
    assert "&lt;script&gt;alert(1)&lt;/script&gt;" in html
    assert "&lt;b&gt;bold&lt;/b&gt;" in html


def test_report_is_self_contained(written):
    html = written[0].read_text()
    assert not re.search(r'(src|href)="(https?:)?//', html)
    assert "@import" not in html and "url(http" not in html and "<link" not in html
    assert "@media print" in html and "@page" in html


def test_every_constant_is_listed_with_its_source(written, result):
    html = written[0].read_text()
    n_rows = html.split('<table class="constants">')[1].split("</table>")[0].count("<tr>") - 1
    assert n_rows == len({k.species for k in result.recommended_titration.constants_used})
    assert "NIST" in html and "(from memory)" in html


def test_safety_cautions_for_cyanide():
    sc = parse("""
name: cyanide-case
sample: {volume: 25 mL}
analyte: {metals: {Ca: 1 mmol/L}}
interferents: {Zn: 0.5 mmol/L}
titrant: {concentration: 0.01 M}
search:
  pH: [9.5, 10.5]
  titrants: [EDTA]
  buffers: [ammonia]
  indicators: [EBT]
  masking: [cyanide]
  modes: [direct]
""", "cn.yaml")
    r = run_search(sc, seed=1, pop_size=16, n_gen=6, with_robustness=False)
    assert any(a == "cyanide" for a, _ in r.recommended.candidate.masking)
    html = report.render(analyse(r))
    safety = html.split('<section id="safety">')[1].split("</section>")[0]
    assert "never add acid" in safety.lower() and "safety data sheet" in safety and "safety officer" in safety
    assert "fume hood" in safety


def test_back_titration_procedure_adds_the_excess_before_the_buffer():
    """Al reacts slowly with EDTA: the excess goes into the acidic sample and is boiled before buffering (common
    practice for the Al back-titration), then the buffer, then the Zn standard."""
    sc = parse(AL_BACK, "al.yaml")
    r = run_search(sc, seed=1, pop_size=12, n_gen=4, with_robustness=False)
    steps = analyse(r).method.procedure
    excess = next(k for k, x in enumerate(steps) if "(an excess)" in x)
    buffer = next(k for k, x in enumerate(steps) if "adjust to pH" in x)
    titrate = next(k for k, x in enumerate(steps) if "Zn standard" in x)
    assert excess < buffer < titrate and "boil" in steps[excess]


BROWSER_WIDTHS = (1280, 390)  # CSS px: a laptop window and a phone (390 px is a common phone's viewport width)

# Measured in the page: its width and scroll width; every figure's right edge; every table's wrapper's right edge and
# whether the table needs to scroll inside it; the headline pH; the pH values the bench procedure gives (two decimals).
LAYOUT_JS = """JSON.stringify({
  page: document.documentElement.clientWidth, scroll: document.documentElement.scrollWidth,
  figures: [...document.querySelectorAll('figure, figure svg')].map(e => [e.closest('figure').id, e.getBoundingClientRect().right, e.getBoundingClientRect().width, e.getBoundingClientRect().height]),
  tables: [...document.querySelectorAll('table')].map(t => { const w = t.parentElement;
    return [t.closest('section') ? t.closest('section').id : '', w.className, w.getBoundingClientRect().right, t.scrollWidth, w.clientWidth]; }),
  headline: (document.getElementById('headline-pH') || {}).textContent || null,
  procedure: [...(document.querySelector('ol.procedure') || {textContent: ''}).textContent.matchAll(/pH (\\d+\\.\\d\\d)(?!\\d)/g)].map(m => m[1])
})"""


def _chromium_or_skip():
    """The browser helper, or a skip that says why (pytest prints the reason: ``-rs`` is in the default options)."""
    import browser
    if browser.find_chromium() is None:
        if os.environ.get("OPTIMISER_REQUIRE_BROWSER"):
            pytest.fail("chromium is required here (OPTIMISER_REQUIRE_BROWSER is set) but not installed")
        pytest.skip("no chromium found (apt-get install chromium); set OPTIMISER_REQUIRE_BROWSER=1 to make this a failure")
    return browser


@pytest.mark.browser
@pytest.mark.parametrize("width", BROWSER_WIDTHS)
def test_report_fits_the_page_in_headless_chromium(written, tmp_path, width):
    """Open the report in Debian's chromium at a laptop's and a phone's width: no console errors; the page never
    scrolls sideways; no figure is wider than the page; every table sits in a wrapper of page width (at 1280 px no
    table even needs to scroll in it); the headline pH equals the procedure's pH to 0.01."""
    browser = _chromium_or_skip()
    shot = tmp_path / f"report-{width}.png"
    out = browser.render(written[0].resolve().as_uri(), str(shot), width=width, height=900, js=LAYOUT_JS)
    assert out["errors"] == []
    m = json.loads(out["value"])
    page = m["page"]
    assert m["scroll"] <= page, f"the page scrolls sideways at {width} px"
    assert len({f[0] for f in m["figures"]}) == len(FIGURES)
    for fig, right, w, h in m["figures"]:
        assert right <= page + 0.5 and w > 100 and h > 100, (fig, right, w, h, page)
    assert m["tables"]
    for section, wrapper, right, table_w, wrapper_w in m["tables"]:
        assert wrapper == "table-scroll" and right <= page + 0.5, (section, wrapper, right, page)
        if width >= 1280:
            assert table_w <= wrapper_w, f"a table in section {section} is cut at {width} px ({table_w} > {wrapper_w})"
    headline = m["headline"].removeprefix("pH ").strip()
    assert re.fullmatch(r"\d+\.\d\d", headline) and m["procedure"], (m["headline"], m["procedure"])
    assert set(m["procedure"]) == {headline}, (headline, m["procedure"])
    assert shot.stat().st_size > 10000
