"""The dashboard at 1280 x 800 (a common projector and laptop size): nothing wider than the
window, the legends of the scores and variance plots clear of their tick labels and axis titles, arrow names clear of each
other, the correlation circle's names inside its plot.

Boxes are read in the page (``getBoundingClientRect`` of the drawn SVG text), so the checks see
the fonts the browser really used, not the server's estimate of them.
"""

import json

import pytest

from tests.browser.test_dashboard import TIMEOUT, _wait_for, _wait_for_parallel_analysis
from webapp.config import AppConfig
from webapp.web.app import create_app

pytestmark = pytest.mark.browser

MEASURE_JS = """
const box = e => { const r = e.getBoundingClientRect(); return {l: r.left, t: r.top, r: r.right, b: r.bottom}; };
const hit = (a, b) => a.l < b.r && b.l < a.r && a.t < b.b && b.t < a.b;
const names = sel => [...document.querySelectorAll(sel + ' .annotation')]
  .filter(a => a.querySelector('.annotation-text-g text'))
  .filter(a => (a.getAttribute('data-index') || '') !== '0' || !/biplot|circle|Showing/.test(a.textContent))
  .map(a => ({text: a.querySelector('text').textContent, box: box(a.querySelector('text'))}))
  .filter(n => n.text && !/biplot|Dotted circle|Strongest /.test(n.text));
const clashes = list => { const c = [];
  for (let i = 0; i < list.length; i++) for (let j = i + 1; j < list.length; j++)
    if (hit(list[i].box, list[j].box)) c.push(list[i].text + ' / ' + list[j].text);
  return c; };
const width = document.documentElement.clientWidth;
const legendOnAxes = sel => { const g = document.querySelector(sel); const legend = g.querySelector('.legend');
  return [...g.querySelectorAll('.g-xtitle text, .g-ytitle text, .g-y2title text, .xtick text, .ytick text, .y2tick text')]
    .filter(t => hit(box(legend), box(t))).map(t => sel + ': ' + t.textContent); };
const circleNames = names('#circle-graph');
const circlePlot = box(document.querySelector('#circle-graph .nsewdrag'));
const circleGraph = box(document.querySelector('#circle-graph'));
return JSON.stringify({
  scrollWidth: document.documentElement.scrollWidth, innerWidth: window.innerWidth,
  wider: [...document.querySelectorAll('body *')].filter(e => { const r = e.getBoundingClientRect();
      return r.width > 0 && r.height > 0 && r.right > width + 0.5; })
    .map(e => e.tagName + '.' + (e.getAttribute('class') || '')),
  legendOnAxes: [...legendOnAxes('#scores-graph'), ...legendOnAxes('#variance-graph')],
  scoresNames: names('#scores-graph').length,
  scoresClashes: clashes(names('#scores-graph')),
  circleNames: circleNames.length,
  circleClashes: clashes(circleNames),
  circleOutside: circleNames.filter(n => n.box.l < circlePlot.l - 1 || n.box.r > circlePlot.r + 1
      || n.box.t < circlePlot.t - 1 || n.box.b > circlePlot.b + 1).map(n => n.text),
  circleTitlesClipped: [...document.querySelectorAll('#circle-graph .g-xtitle text, #circle-graph .g-ytitle text')]
    .filter(t => { const b = box(t); return b.l < circleGraph.l || b.r > circleGraph.r || b.t < circleGraph.t
      || b.b > circleGraph.b; }).map(t => t.textContent),
});
"""


@pytest.fixture
def app(tmp_path):
    return create_app(AppConfig(data_dir=tmp_path / "data"))


def test_demo_view_at_1280_by_800_has_nothing_cut_off_or_overlapping(dash_duo, app):
    dash_duo.driver.set_window_size(1280, 800)
    dash_duo.start_server(app)  # opens on the demo data: 13 variables, four sites
    dash_duo.wait_for_element("#scores-graph .js-plotly-plot", timeout=TIMEOUT)
    _wait_for_parallel_analysis(dash_duo.driver)
    _wait_for(lambda: dash_duo.driver.find_elements("css selector", "#circle-graph .annotation"))
    dash_duo.driver.execute_script("return new Promise(r => setTimeout(r, 1500));")  # last redraws
    m = json.loads(dash_duo.driver.execute_script(MEASURE_JS))
    assert m["scrollWidth"] <= m["innerWidth"], m["wider"]
    assert m["wider"] == []
    assert m["legendOnAxes"] == []
    assert m["scoresNames"] == 13 and m["scoresClashes"] == []
    assert m["circleNames"] == 13 and m["circleClashes"] == []
    assert m["circleOutside"] == [] and m["circleTitlesClipped"] == []


def test_a_flagged_row_picks_its_sample_and_the_scores_plot_names_it(dash_duo, app):
    dash_duo.driver.set_window_size(1280, 800)
    dash_duo.start_server(app)
    dash_duo.wait_for_element("#scores-graph .js-plotly-plot", timeout=TIMEOUT)
    _wait_for_parallel_analysis(dash_duo.driver)
    button = dash_duo.wait_for_element("#flagged-list .pick-row", timeout=TIMEOUT)
    label = button.text
    dash_duo.driver.execute_script("arguments[0].scrollIntoView({block: 'center'});", button)
    button.click()
    _wait_for(lambda: "pick=" + label in dash_duo.driver.current_url)
    # Its contributions appear, and the scores plot writes its name beside its point.
    _wait_for(lambda: label in dash_duo.find_element("#contributions").text)
    _wait_for(lambda: any(label in e.text for e in dash_duo.driver.find_elements(
        "css selector", "#scores-graph .annotation-text-g")))
