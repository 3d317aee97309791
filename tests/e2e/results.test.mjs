// The results screen in the browser: the demo season's charts are drawn from
// the `results` operation — one line per treatment in each cover and damage
// panel, a survival curve per treatment and stocked taxon, every effect size
// on the correct side of "no effect" — each beside what it assumes, and the
// rule for missing animals can be switched.

import { test, after } from 'node:test';
import assert from 'node:assert/strict';
import { mkdtempSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { launchBrowser, screenshot, startServer } from './harness.mjs';

const browser = await launchBrowser();
after(() => browser.close());

const AFTER_SEASON = '2026-06-11';

async function api(url, op, args = {}) {
  const r = await fetch(`${url}api/${op}`, { method: 'POST', headers: { 'content-type': 'application/json' }, body: JSON.stringify(args) });
  assert.equal(r.status, 200, `${op}: ${r.status}`);
  return r.json();
}

function count(list, key) {
  const m = new Map();
  for (const x of list) m.set(x[key], (m.get(x[key]) ?? 0) + 1);
  return m;
}

test('the results screen draws every chart of the season with its assumptions', async () => {
  const db = join(mkdtempSync(join(tmpdir(), 'fieldcage-results-')), 'demo.db');
  const server = await startServer(db, { demo: true, today: AFTER_SEASON });
  const page = await browser.newPage({ viewport: { width: 1280, height: 900 } });
  const errors = [];
  page.on('pageerror', (e) => errors.push(String(e)));
  try {
    const expected = await api(server.url, 'results');
    await page.goto(`${server.url}#/route`);
    await page.locator('a.button[href="#/results"]').click();
    await page.locator('#results-effects svg[data-chart="effects"]').waitFor();

    // The legend names every treatment.
    const legend = await page.locator('.legend li').evaluateAll((lis) => lis.map((li) => li.dataset.treatment));
    assert.deepEqual(legend, expected.treatments.map((t) => t.code));

    // Cover and damage: a panel per response, a line per treatment, a marker per day.
    for (const list of [expected.charts.cover_over_time, expected.charts.damage_by_treatment]) {
      for (const [response, lines] of count(list, 'response')) {
        const chart = page.locator(`svg[data-chart="${response}"]`);
        assert.equal(await chart.locator('g.series').count(), lines, response);
        const points = list.filter((s) => s.response === response).reduce((n, s) => n + s.points.length, 0);
        assert.equal(await chart.locator('.point').count(), points, `${response} points`);
      }
    }
    // The highest mean of total cover is drawn highest in its panel.
    const total = expected.charts.cover_over_time.filter((s) => s.response === 'cover.total');
    const top = total.flatMap((s) => s.points.map((p) => ({ t: s.treatment, day: p.day, mean: p.mean }))).sort((a, b) => b.mean - a.mean)[0];
    const ys = await page.locator('svg[data-chart="cover.total"] g.series').evaluateAll((gs) =>
      gs.map((g) => ({ t: g.dataset.key, ys: [...g.querySelectorAll('.point')].map((p) => p.getBBox().y) })),
    );
    const minY = Math.min(...ys.flatMap((g) => g.ys));
    const topSeries = ys.find((g) => g.t === top.t);
    const topIndex = total.find((s) => s.treatment === top.t).points.findIndex((p) => p.day === top.day);
    assert.equal(topSeries.ys[topIndex], minY, `highest mean ${top.t} day ${top.day}`);

    // Survival: a panel per stocked taxon, a step line per treatment.
    for (const [taxon, curves] of count(expected.charts.survival_curves, 'taxon')) {
      assert.equal(await page.locator(`svg[data-chart="survival.${taxon}"] g.series`).count(), curves, taxon);
    }

    // Effect sizes: one row each, on the side of 0 its sign says.
    const effects = expected.charts.effect_sizes;
    assert.equal(await page.locator('g.effect').count(), effects.length);
    const zero = await page.locator('svg[data-chart="effects"] line.zero').evaluate((l) => Number(l.getAttribute('x1')));
    const drawn = await page.locator('g.effect').evaluateAll((gs) =>
      gs.map((g) => {
        const b = g.querySelector('.point').getBBox();
        return { response: g.dataset.response, contrast: g.dataset.contrast, x: b.x + b.width / 2 };
      }),
    );
    for (const e of effects) {
      const d = drawn.find((x) => x.response === e.response && x.contrast === e.contrast);
      assert.ok(d, `${e.response} ${e.contrast} drawn`);
      if (Math.abs(e.lrr) > 0.01) assert.equal(Math.sign(d.x - zero), Math.sign(e.lrr), `${e.response} ${e.contrast}: lrr ${e.lrr}`);
    }

    // The split table and what every part assumes.
    assert.equal(await page.locator('table.split tbody tr').count(), expected.charts.predator_split.length);
    assert.equal(await page.locator('details.assumes').count(), 5);
    const splitText = await page.locator('#results-split details.assumes p').textContent();
    assert.equal(splitText, expected.assumptions.split);
    await screenshot(page, 'results');

    // Counting missing animals as censored asks again and says so.
    await Promise.all([page.waitForResponse((r) => r.url().endsWith('/api/results')), page.locator('#missing-as').selectOption('censored')]);
    await page.locator('#results-survival details.assumes p', { hasText: 'censored' }).waitFor({ state: 'attached' });
    assert.equal(await page.locator('#missing-as').inputValue(), 'censored');
    assert.deepEqual(errors, []);
  } finally {
    await page.close();
    await server.stop();
  }
});
