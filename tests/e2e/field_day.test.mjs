// A crew member's field day in the browser: the route, a census, a cover
// survey by each of the three methods, a damage score on a tagged leaf; then a
// reload and a server restart, after which everything must still be there.

import { test, after } from 'node:test';
import assert from 'node:assert/strict';
import { writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { ARTIFACTS, definitionWithCover, initDatabase, launchBrowser, savedAndRedrawn, screenshot, startServer } from './harness.mjs';

// Day 14 of the demo schedule: cover and damage are due (demo_data/definition.toml).
const TODAY = '2026-05-25';
const browser = await launchBrowser();
after(() => browser.close());

async function typeInto(page, locator, value) {
  await savedAndRedrawn(page, async () => {
    await locator.fill(String(value));
    await locator.press('Tab');
  });
}

async function openCage(page, url, label) {
  await page.goto(`${url}#/route`);
  await page.locator('#observer').fill('crew-T');
  await page.locator('#observer').press('Tab');
  await page.locator(`a.cage[data-label="${label}"]`).click();
  await page.locator('#census').waitFor();
  return page.url().split('#')[1];
}

/** What the sheet shows, read from the page. */
async function readSheet(page) {
  await page.locator('#census').waitFor();
  return page.evaluate(() => ({
    alive: document.querySelector('.census-row[data-taxon="SLUG"] input[name=alive]').value,
    dead: document.querySelector('.census-row[data-taxon="SLUG"] input[name=dead]').value,
    coverGrass: document.querySelector('.cover-row[data-target="GRA1"] small').textContent,
    coverLitter: document.querySelector('.cover-row[data-target="litter"] small').textContent,
    total: document.getElementById('cover-total').textContent,
    leaf: document.querySelector('.leaf-row[data-tag="C-01-T1"] .class.chosen strong')?.textContent ?? null,
  }));
}

async function recordCensusAndDamage(page) {
  const slug = page.locator('.census-row[data-taxon="SLUG"]');
  await typeInto(page, slug.locator('input[name=alive]'), 7);
  await typeInto(page, slug.locator('input[name=dead]'), 1);
  // Tag the first leaf, then score it in class 2 (Dirzo & Dominguez classes).
  await savedAndRedrawn(page, () => page.locator('.tag-form button').click());
  const leaf = page.locator('.leaf-row[data-tag="C-01-T1"]');
  await savedAndRedrawn(page, () => leaf.locator('button.class', { hasText: /^2/ }).click());
}

const methods = {
  async percent(page) {
    await typeInto(page, page.locator('.cover-row[data-target="GRA1"] input'), 40);
    await typeInto(page, page.locator('.cover-row[data-target="litter"] input'), 55);
    return { coverGrass: '40 %', coverLitter: '55 %', total: 'Species + ground: 95 % (should be 100 ± 5)' };
  },
  async class(page) {
    // Daubenmire classes 3 and 2 -> midpoints 37.5 and 15 (Daubenmire 1959).
    await savedAndRedrawn(page, () => page.locator('.cover-row[data-target="GRA1"] button.class', { hasText: /^3/ }).click());
    await savedAndRedrawn(page, () => page.locator('.cover-row[data-target="litter"] button.class', { hasText: /^2/ }).click());
    return { coverGrass: '37.5 %', coverLitter: '15 %', total: 'Species + ground: 52.5 % (should be 100 ± 5)' };
  },
  async pins(page) {
    // 10-pin frame: 4 hits -> 40 %, 6 hits -> 60 % (Elzinga, Salzer & Willoughby 1998).
    for (let i = 0; i < 4; i++) await savedAndRedrawn(page, () => page.locator('.cover-row[data-target="GRA1"] button', { hasText: '+' }).click());
    for (let i = 0; i < 6; i++) await savedAndRedrawn(page, () => page.locator('.cover-row[data-target="litter"] button', { hasText: '+' }).click());
    return { coverGrass: '40 %', coverLitter: '60 %', total: 'Hits so far: 10 of 10 pins (first hits must add up to the frame)' };
  },
};

for (const [method, enterCover] of Object.entries(methods)) {
  test(`field day with ${method} cover survives a reload and a server restart`, async () => {
    const db = initDatabase(definitionWithCover(method), method);
    let server = await startServer(db, { today: TODAY });
    const page = await browser.newPage({ viewport: { width: 1280, height: 800 } });
    try {
      await page.goto(`${server.url}#/route`);
      await page.locator('.day').filter({ hasText: 'Day 14' }).waitFor();
      if (method === 'percent') await screenshot(page, 'route');
      const hash = await openCage(page, server.url, 'C-01');
      await recordCensusAndDamage(page);
      const expectedCover = await enterCover(page);
      const expected = { alive: '7', dead: '1', leaf: '2', ...expectedCover };
      await screenshot(page, `sheet-${method}`);
      assert.deepEqual(await readSheet(page), expected, 'as entered');

      await page.reload();
      assert.deepEqual(await readSheet(page), expected, 'after a reload');

      await server.stop();
      server = await startServer(db, { today: TODAY });
      await page.goto(`${server.url}#${hash}`);
      assert.deepEqual(await readSheet(page), expected, 'after the server restarted');
      await screenshot(page, `sheet-${method}-after-restart`);
    } finally {
      await page.close();
      await server.stop();
    }
  });
}

test('the route of the demo season renders and reports its first-render time', async () => {
  const db = join(initDatabase(definitionWithCover('percent'), 'unused'), '..', 'demo.db');
  const server = await startServer(db, { demo: true, today: '2026-06-01' });
  const page = await browser.newPage({ viewport: { width: 1024, height: 1366 } });
  try {
    await page.goto(`${server.url}#/route`);
    await page.locator('a.cage').first().waitFor();
    const ms = await page.evaluate(() => performance.now());
    const cages = await page.locator('a.cage').count();
    // Day 21 of the demo: census and damage due in all 24 cages (demo_data/definition.toml).
    assert.equal(cages, 24);
    // C-15 missed its day-18 census (demo_data/README.md): the route says so.
    assert.match(await page.locator('a.cage[data-label="C-15"]').textContent(), /Missed: Census day 18/);
    await screenshot(page, 'route-demo-portrait');
    writeFileSync(join(ARTIFACTS, 'first-render.json'), JSON.stringify({ route_first_render_ms: Math.round(ms), cages }, null, 2));
    console.log(`route first render on the demo season: ${Math.round(ms)} ms`);
  } finally {
    await page.close();
    await server.stop();
  }
});
