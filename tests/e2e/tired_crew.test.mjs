// A tired crew on the sheet (issue 15): double taps on every action button,
// two tabs on one cage, letters and decimals in number fields, clearing a
// field, a reload with an entry typed and not finished, the local service
// stopped and started again mid-entry, the back button and a past day. Each
// case asserts on what is stored — an export of the database — not on what
// the screen says, and keeps a screenshot in test-artifacts/e2e/.
//
// Nothing waits for a fixed time: each step waits for an answer of the
// server or for the header's save state.

import { test, after } from 'node:test';
import assert from 'node:assert/strict';
import { mkdtempSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { api, definitionWithCover, exported, initDatabase, launchBrowser, screenshot, startServer } from './harness.mjs';

// Day 14 of the demo schedule: cover and damage due (demo_data/definition.toml).
const TODAY = '2026-05-25';
const browser = await launchBrowser();
after(() => browser.close());

/** A new database and its server on the demo definition (percent cover). */
async function fieldDay(name) {
  const db = initDatabase(definitionWithCover('percent'), name);
  const server = await startServer(db, { today: TODAY });
  return { db, server };
}

/** A tablet-sized page with the observer set. */
async function tablet(url) {
  const page = await browser.newPage({ viewport: { width: 800, height: 1280 } });
  await page.goto(`${url}#/route`);
  await page.locator('#observer').fill('crew-T');
  await page.locator('#observer').press('Tab');
  return page;
}

/**
 * Run `work` on a new database and its server (the demo definition with
 * percent cover unless another is given) with a tablet page open; closes
 * both afterwards.
 */
async function onFieldDay(name, work, { definition = definitionWithCover('percent'), today = TODAY } = {}) {
  const db = initDatabase(definition, name);
  const server = await startServer(db, { today });
  const page = await tablet(server.url);
  try {
    await work({ db, server, page });
  } finally {
    await page.close();
    await server.stop();
  }
}

/** The id of the first cage of a treatment. */
async function cageOf(url, treatment) {
  const route = await api(url, 'route', {});
  return route.blocks.flatMap((b) => b.cages).find((c) => c.treatment_code === treatment);
}

async function openSheet(page, url, cage) {
  await page.goto(`${url}#/cage/${cage.enclosure_id}`);
  await page.locator('#census').waitFor();
}

/** Wait until the header says everything is saved. */
async function allSaved(page) {
  await page.waitForFunction(() => document.getElementById('save-state').textContent.includes('All saved'));
}

/** Two taps at the same spot, as a finger does, then wait for the sheet to settle. */
async function doubleTap(page, locator) {
  await locator.scrollIntoViewIfNeeded();
  const box = await locator.boundingBox();
  const x = box.x + box.width / 2;
  const y = box.y + box.height / 2;
  await page.mouse.click(x, y);
  await page.mouse.click(x, y);
  await allSaved(page);
  return { x, y };
}

/** Type into a field and finish the entry (Tab), then wait for the answer. */
async function enter(page, locator, text) {
  await locator.fill(text);
  await locator.press('Tab');
  await allSaved(page);
}

const rowsOf = (tables, table, filter = () => true) => tables[table].filter(filter);

test('double taps on every action button make one record each', async () => {
  await onFieldDay('double-taps', async ({ db, server, page }) => {
    const cage = await cageOf(server.url, 'SB');
    await openSheet(page, server.url, cage);
    const taxa = Object.fromEntries((await api(server.url, 'sheet', { enclosure_id: cage.enclosure_id })).animals.map((a) => [a.taxon.code, a.taxon.id]));
    // "Stock 10 SLUG": a double tap, then a third tap where the button was
    // (the redraw must not move "Stock 2 BEET" under the finger).
    const spot = await doubleTap(page, page.locator('button.stock[data-taxon="SLUG"]'));
    await page.mouse.click(spot.x, spot.y);
    await allSaved(page);
    // The restock prompt: a census below the threshold, then a double tap.
    await enter(page, page.locator('.census-row[data-taxon="SLUG"] input[name=alive]'), '3');
    await doubleTap(page, page.locator('.census-row[data-taxon="SLUG"] .restock button'));
    // "Tag leaf", twice at once, then once more where it stood.
    const tagSpot = await doubleTap(page, page.locator('.tag-form button'));
    await page.mouse.click(tagSpot.x, tagSpot.y);
    await allSaved(page);
    // A class, twice: the second tap keeps it (it does not clear it); then
    // "Leaf lost" twice on the first leaf: the second leaf is not touched.
    const first = page.locator('.leaf-row').first();
    const firstTag = await first.getAttribute('data-tag');
    await doubleTap(page, first.locator('button.class', { hasText: /^2/ }));
    const lostSpot = await doubleTap(page, first.locator('button', { hasText: 'Leaf lost' }));
    await page.mouse.click(lostSpot.x, lostSpot.y);
    await allSaved(page);
    // "Finish census", twice.
    await doubleTap(page, page.locator('.visit-row[data-kind="census"] button', { hasText: 'Finish' }));
    await screenshot(page, 'tired-double-taps');

    const t = exported(db);
    const events = rowsOf(t, 'stocking_event');
    const of = (code, kind) => events.filter((e) => e.taxon_id === taxa[code] && e.kind === kind);
    assert.equal(of('SLUG', 'initial').length, 1, 'one initial stocking of SLUG');
    assert.equal(of('BEET', 'initial').length, 0, 'the third tap did not stock BEET');
    assert.deepEqual(of('SLUG', 'restock').map((e) => e.count), ['7'], 'one restock of 7 (10 planned, 3 alive)');
    // Two leaves: the double tap tagged one, the tap after the redraw the next.
    const leaves = rowsOf(t, 'tagged_leaf');
    assert.equal(new Set(leaves.map((l) => l.tag_label)).size, leaves.length, 'no label twice');
    assert.ok(leaves.length <= 2, `at most one leaf per tap that was not a repeat: ${leaves.length}`);
    const scored = rowsOf(t, 'damage_record');
    const firstLeaf = leaves.find((l) => l.tag_label === firstTag);
    assert.deepEqual(scored.map((d) => [d.leaf_id, d.class_code]), [[firstLeaf.id, '2']], 'the first leaf scored once, class 2 kept');
    assert.deepEqual(leaves.filter((l) => l.fate === 'lost').map((l) => l.id), [firstLeaf.id], 'one leaf lost, the next one untouched');
    assert.equal(rowsOf(t, 'visit', (v) => v.kind === 'census' && v.completed === 'true').length, 1);
  });
});

test('two tabs on one cage never lose an update: the stale save is refused and shows both values', async () => {
  const { db, server } = await fieldDay('two-tabs');
  const a = await tablet(server.url);
  const b = await browser.newPage({ viewport: { width: 800, height: 1280 } });
  try {
    const cage = await cageOf(server.url, 'S');
    await openSheet(a, server.url, cage);
    const slugA = a.locator('.census-row[data-taxon="SLUG"]');
    await enter(a, slugA.locator('input[name=alive]'), '7');
    await enter(a, slugA.locator('input[name=dead]'), '1');
    // Tab B opens the cage now (alive 7, dead 1); tab A then changes alive to 6.
    await openSheet(b, server.url, cage);
    await enter(a, slugA.locator('input[name=alive]'), '6');
    // B, stale, enters missing: alive must stay 6 (it used to be put back to 7).
    const slugB = b.locator('.census-row[data-taxon="SLUG"]');
    await enter(b, slugB.locator('input[name=missing]'), '0');
    let census = exported(db).census;
    assert.deepEqual(census.map((c) => [c.alive, c.dead, c.missing]), [['6', '1', '0']]);
    // A changes dead to 2; B, which still shows 1, changes it to 4: refused,
    // with both values shown.
    await enter(a, slugA.locator('input[name=dead]'), '2');
    await slugB.locator('input[name=dead]').fill('4');
    await slugB.locator('input[name=dead]').press('Tab');
    const problem = slugB.locator('.field-problem');
    await problem.waitFor();
    const text = await problem.textContent();
    assert.match(text, /Dead/);
    assert.match(text, /now 2|to 2/);
    assert.match(text, /saw 1/);
    assert.match(text, /4/);
    // The sheet shows the stored value again.
    await b.waitForFunction(() => document.querySelector('.census-row[data-taxon="SLUG"] input[name=dead]').value === '2');
    await screenshot(b, 'tired-two-tabs-stale');
    census = exported(db).census;
    assert.deepEqual(census.map((c) => [c.alive, c.dead, c.missing]), [['6', '2', '0']], 'the stale value was not stored');
  } finally {
    await a.close();
    await b.close();
    await server.stop();
  }
});

test('letters, decimals, 450 % and negative numbers are refused at the field; what is stored stays', async () => {
  await onFieldDay('strict', async ({ db, server, page }) => {
    const cage = await cageOf(server.url, 'S');
    await openSheet(page, server.url, cage);
    const slug = page.locator('.census-row[data-taxon="SLUG"]');
    await enter(page, slug.locator('input[name=dead]'), '1');
    const grass = page.locator('.cover-row[data-target="GRA1"] input');
    await enter(page, grass, '45');
    for (const [field, typed, says] of [
      [slug.locator('input[name=dead]'), '1.5', 'Dead: 1.5 is not a whole number'],
      [slug.locator('input[name=dead]'), '2o', 'Dead: “2o” is not a number'],
      [slug.locator('input[name=dead]'), 'l0', 'Dead: “l0” is not a number'],
      [slug.locator('input[name=dead]'), '-3', 'Dead: -3 is below 0'],
      [grass, 'e', 'GRA1 percent: “e” is not a number'],
      [grass, '450', 'GRA1 percent: 450 is above 100 %'],
    ]) {
      await field.fill(typed);
      await field.press('Tab');
      const box = field.locator('xpath=ancestor::*[self::label or contains(@class, "cover-row")][1]').locator('.field-problem');
      await box.waitFor();
      assert.match(await box.textContent(), new RegExp(says.replace(/[.*+?^${}()|[\]\\]/g, '\\$&')));
      assert.notEqual(await field.inputValue(), typed, 'the refused value is not left on screen');
    }
    await screenshot(page, 'tired-strict-input');
    let t = exported(db);
    assert.deepEqual(t.census.map((c) => c.dead), ['1']);
    assert.deepEqual(t.cover_record.map((c) => c.value_pct), ['45']);
    // The next valid entry saves normally.
    await enter(page, slug.locator('input[name=dead]'), '2');
    t = exported(db);
    assert.deepEqual(t.census.map((c) => c.dead), ['2']);
  });
});

test('clearing a field stores "not assessed", never 0, and a chosen class can be cleared', async () => {
  await onFieldDay('clearing', async ({ db, server, page }) => {
    const cage = await cageOf(server.url, 'S');
    await openSheet(page, server.url, cage);
    const grass = page.locator('.cover-row[data-target="GRA1"] input');
    await enter(page, grass, '45');
    await enter(page, grass, '');
    const slug = page.locator('.census-row[data-taxon="SLUG"]');
    await enter(page, slug.locator('input[name=alive]'), '4');
    await enter(page, slug.locator('input[name=alive]'), '');
    // Damage classes (the demo protocol): choose class 2, then tap it again.
    await page.locator('.tag-form button').click();
    await allSaved(page);
    const leaf = page.locator('.leaf-row').first();
    await leaf.locator('button.class', { hasText: /^2/ }).click();
    await allSaved(page);
    await leaf.locator('button.clear').click();
    await allSaved(page);
    await screenshot(page, 'tired-cleared');
    const t = exported(db);
    assert.deepEqual(t.cover_record.map((c) => [c.value_pct, c.cover_pct]), [['', '']]);
    assert.deepEqual(t.census.map((c) => c.alive), ['']);
    assert.deepEqual(t.damage_record.map((d) => [d.class_code, d.damage_pct]), [['', '']]);
  });
});

test('clearing a damage percent stores "not assessed", and a chosen cover class can be cleared', async () => {
  // Class cover (Daubenmire 1959 classes) and percent damage on one database.
  const definition = definitionWithCover('class').replace('method = "class"\nscale = "dirzo-dominguez"', 'method = "percent"');
  assert.ok(definition.includes('[damage]\ncode = "leaf-classes"\nmethod = "percent"'), 'the damage section is now percent');
  await onFieldDay('clearing-percent', async ({ db, server, page }) => {
    const cage = await cageOf(server.url, 'S');
    await openSheet(page, server.url, cage);
    const grass = page.locator('.cover-row[data-target="GRA1"]');
    await grass.locator('button.class', { hasText: /^3/ }).click();
    await allSaved(page);
    await grass.locator('button.clear').click();
    await allSaved(page);
    await page.locator('.tag-form button').click();
    await allSaved(page);
    const leaf = page.locator('.leaf-row').first().locator('input');
    await enter(page, leaf, '12');
    await enter(page, leaf, '');
    await screenshot(page, 'tired-cleared-percent');
    const t = exported(db);
    assert.deepEqual(t.cover_record.map((c) => [c.class_code, c.cover_pct]), [['', '']]);
    assert.deepEqual(t.damage_record.map((d) => [d.value_pct, d.damage_pct]), [['', '']], 'cleared is empty, never 0 %');
  }, { definition });
});

test('a reload with an entry typed and not finished loses nothing', async () => {
  await onFieldDay('reload', async ({ db, server, page }) => {
    const cage = await cageOf(server.url, 'S');
    await openSheet(page, server.url, cage);
    const alive = page.locator('.census-row[data-taxon="SLUG"] input[name=alive]');
    await alive.fill('9');
    // Typed, not finished: the header must not say all is saved.
    assert.doesNotMatch(await page.locator('#save-state').textContent(), /All saved/);
    await page.reload();
    await page.locator('#census').waitFor();
    await allSaved(page);
    await page.waitForFunction(() => document.querySelector('.census-row[data-taxon="SLUG"] input[name=alive]').value === '9');
    await screenshot(page, 'tired-reload');
    assert.deepEqual(exported(db).census.map((c) => c.alive), ['9']);
  });
});

test('the service stopped and started again mid-entry: the outbox delivers, exactly once', async () => {
  const { db, server: first } = await fieldDay('outbox');
  let server = first;
  const page = await tablet(server.url);
  try {
    const cage = await cageOf(server.url, 'S');
    await openSheet(page, server.url, cage);
    const slug = page.locator('.census-row[data-taxon="SLUG"]');
    await enter(page, slug.locator('input[name=alive]'), '9');
    await server.stop();
    await slug.locator('input[name=alive]').fill('10');
    await slug.locator('input[name=alive]').press('Tab');
    await slug.locator('input[name=dead]').fill('1');
    await slug.locator('input[name=dead]').press('Tab');
    await page.waitForFunction(() => /2 waiting/.test(document.getElementById('save-state').textContent));
    assert.equal(await slug.locator('input[name=alive]').inputValue(), '10', 'the typed value stays on screen while it waits');
    await screenshot(page, 'tired-outbox-waiting');
    server = await startServer(db, { today: TODAY, port: first.port });
    await allSaved(page);
    await page.waitForFunction(() => document.querySelector('.census-row[data-taxon="SLUG"] input[name=alive]').value === '10');
    await screenshot(page, 'tired-outbox-delivered');
    const t = exported(db);
    assert.deepEqual(t.census.map((c) => [c.alive, c.dead]), [['10', '1']]);
    const history = await api(server.url, 'history', { table: 'census', id: t.census[0].id });
    const alive = history.filter((c) => c.field === 'alive').map((c) => c.new);
    assert.deepEqual(alive, [9, 10], 'each entry stored once, in the order made');
  } finally {
    await page.close();
    await server.stop();
  }
});

test('the back button and a past day lead to working screens with the day shown', async () => {
  await onFieldDay('navigation', async ({ db, server, page }) => {
    const cage = await cageOf(server.url, 'S');
    await page.locator(`a.cage[data-label="${cage.label}"]`).click();
    await page.locator('#census').waitFor();
    await page.locator('.census-row[data-taxon="SLUG"] input[name=alive]').fill('8');
    await page.goBack();
    await page.locator('section.route-head').waitFor();
    await allSaved(page);
    assert.equal(await page.locator('#census').count(), 0, 'no sheet painted over the route');
    assert.match(page.url(), /#\/route$/);
    // The value typed before going back was saved, not lost.
    assert.deepEqual(exported(db).census.map((c) => c.alive), ['8']);
    // The route still works: another cage opens, at the top of its sheet.
    const other = (await api(server.url, 'route', {})).blocks.flatMap((b) => b.cages).find((c) => c.label !== cage.label);
    await page.locator(`a.cage[data-label="${other.label}"]`).click();
    await page.locator('#census').waitFor();
    assert.equal(await page.evaluate(() => scrollY), 0);
    // A past day (as a flag's "Open the record" opens it): a banner says so,
    // and one tap leads back to today.
    await page.goto(`${server.url}?date=2026-05-20#/route`);
    const banner = page.locator('#day-banner');
    await banner.waitFor();
    assert.match(await banner.textContent(), /2026-05-20/);
    await screenshot(page, 'tired-past-day');
    await page.locator('#back-to-today').click();
    await page.locator('.day').filter({ hasText: 'Day 14' }).waitFor();
    assert.equal(await banner.isHidden(), true);
    assert.doesNotMatch(page.url(), /date=/);
  });
});

test('the sheet has what a field day needs: removals, notes, accounting, cover only when due, history, safety', async () => {
  // Day 21 of the demo definition: census and damage due, no cover survey.
  await onFieldDay('field-day-needs', async ({ db, server, page }) => {
    const favicon = await fetch(`${server.url}favicon.svg`);
    assert.equal(favicon.status, 200, 'a favicon, no 404 on every load');
    const cage = await cageOf(server.url, 'S');
    await openSheet(page, server.url, cage);
    // Cover fields only on cover-survey days; an unscheduled survey is a choice.
    assert.equal(await page.locator('.cover-row').count(), 0);
    await page.locator('#unscheduled-cover').click();
    await page.locator('.cover-row').first().waitFor();
    // Stock, then count: 10 stocked, 12 accounted for warns at once.
    await page.locator('button.stock[data-taxon="SLUG"]').click();
    await allSaved(page);
    const slug = page.locator('.census-row[data-taxon="SLUG"]');
    await page.goto(`${server.url}?date=2026-06-04#/cage/${cage.enclosure_id}`);
    await page.locator('#census').waitFor();
    await enter(page, slug.locator('input[name=alive]'), '9');
    await enter(page, slug.locator('input[name=dead]'), '2');
    await enter(page, slug.locator('input[name=missing]'), '1');
    // 9 + 2 + 1 = 12 of the 10 stocked: the line warns (waits for the redraw).
    await slug.locator('.accounted.warn', { hasText: /12 of 10 — does not add up/ }).waitFor();
    await enter(page, slug.locator('input.note'), 'one found under the mesh edge');
    // A removal needs a reason; then it is stored with it.
    await page.locator('details.other summary').click();
    const form = page.locator('.other-stocking');
    await form.locator('select[name=kind]').selectOption('removal');
    await form.locator('input[name=count]').fill('1');
    await form.locator('button').click();
    await form.locator('.field-problem').waitFor();
    await form.locator('input[name=reason]').fill('escaped through a torn seam, taken out');
    await form.locator('button').click();
    await allSaved(page);
    await screenshot(page, 'tired-field-day-needs');
    const t = exported(db);
    const removal = t.stocking_event.filter((e) => e.kind === 'removal');
    assert.deepEqual(removal.map((e) => [e.count, e.notes]), [['1', 'escaped through a torn seam, taken out']]);
    assert.deepEqual(t.census.map((c) => c.notes), ['one found under the mesh edge']);
    // History from the row: who (the device's name) and when.
    await slug.locator('a.history-link').click();
    await page.locator('ol.history li').first().waitFor();
    const first = await page.locator('ol.history li').first().textContent();
    assert.match(first, /device-|tablet/);
    assert.match(first, /\d{4}-\d{2}-\d{2} \d{2}:\d{2}:\d{2}/);
    // The safety card is on the sheet too.
    await page.goBack();
    await page.locator('#census').waitFor();
    assert.equal(await page.locator('details.safety').count(), 1);
  }, { today: '2026-06-01' });
});

test('on the demo field day the route lists what is still due and "Next cage due" leads there', async () => {
  // The demo as the run command opens it: day 21 at 09:45, cages still due.
  const db = join(mkdtempSync(join(tmpdir(), 'fieldcage-e2e-demo-day-')), 'field-day.db');
  const server = await startServer(db, { demo: true, today: '2026-06-01' });
  const page = await tablet(server.url);
  try {
    const cages = (await api(server.url, 'route', {})).blocks.flatMap((b) => b.cages);
    const left = cages.filter((c) => c.state !== 'done' && c.state !== 'nothing_due');
    assert.ok(left.length > 0 && left.length < cages.length, `some cages done, some due: ${left.length} of ${cages.length}`);
    await page.locator('button[data-filter="left"]').click();
    await page.locator('button[data-filter="left"][aria-pressed="true"]').waitFor();
    const shown = await page.locator('a.cage').evaluateAll((as) => as.map((a) => a.dataset.label));
    assert.deepEqual(shown, left.map((c) => c.label), 'the filter lists exactly the cages with work left');
    // From a finished cage, "Next cage due" opens one with work left.
    const done = cages.find((c) => c.state === 'done');
    await openSheet(page, server.url, done);
    await page.locator('button.next-cage').click();
    await page.waitForFunction((id) => !location.hash.endsWith(id), done.enclosure_id);
    await page.locator('#census').waitFor();
    const opened = page.url().split('#/cage/')[1];
    assert.ok(left.some((c) => c.enclosure_id === opened), `opened ${opened}`);
  } finally {
    await page.close();
    await server.stop();
  }
});
