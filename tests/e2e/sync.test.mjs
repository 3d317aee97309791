// Sync in the browser: set this tablet's name and sync folder in Settings,
// record a census, press "Sync now" and see nothing left to send and the time
// of the last sync; then a conflict made by two tablets shows up on the
// conflicts screen with both values, and using the other tablet's value
// settles it.

import { test, after } from 'node:test';
import assert from 'node:assert/strict';
import { mkdtempSync, mkdirSync, readFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { api, initDatabase, launchBrowser, ROOT, savedAndRedrawn, screenshot, startServer } from './harness.mjs';

// Day 14 of the demo schedule (demo_data/definition.toml).
const TODAY = '2026-05-25';
const DEFINITION = readFileSync(join(ROOT, 'demo_data', 'definition.toml'), 'utf8');
const browser = await launchBrowser();
after(() => browser.close());

function sharedFolder() {
  const dir = mkdtempSync(join(tmpdir(), 'fieldcage-shared-'));
  return join(dir, 'stick');
}

async function headerPending(page) {
  return Number(await page.locator('#sync-state .sync-pending').getAttribute('data-count'));
}

test('settings, a census and "Sync now": nothing left to send, a last-sync time shown', async () => {
  const db = initDatabase(DEFINITION, 'settings');
  // No automatic sync: the button is what syncs here.
  const server = await startServer(db, { today: TODAY, syncEvery: 0 });
  const page = await browser.newPage({ viewport: { width: 1280, height: 900 } });
  try {
    await page.goto(`${server.url}#/settings`);
    await page.locator('#device-name').waitFor();
    assert.equal(await page.locator('#sync-now').isDisabled(), true, 'no folder yet: nothing to sync with');
    assert.match(await page.locator('#sync-state').textContent(), /Sync folder not set/);

    // A relative path is refused, naming the problem beside the field.
    await page.locator('#sync-target').fill('stick/fieldcage');
    await page.locator('#save-settings').click();
    await page.locator('#sync-target-problem:not([hidden])').waitFor();
    assert.match(await page.locator('#sync-target-problem').textContent(), /absolute/);

    const target = sharedFolder();
    mkdirSync(join(target, '..'), { recursive: true });
    await page.locator('#device-name').fill('Tablet East');
    await page.locator('#sync-target').fill(target);
    await Promise.all([page.waitForResponse((r) => r.url().endsWith('/api/settings')), page.locator('#save-settings').click()]);
    await page.locator('#sync-state.ready').waitFor();
    assert.equal(await page.locator('#device-name').inputValue(), 'Tablet East');
    assert.equal(await page.locator('#sync-target').inputValue(), target);
    assert.match(await page.locator('#sync-state .sync-last').textContent(), /Never synced/);

    // Record a census on the first cage.
    await page.goto(`${server.url}#/route`);
    await page.locator('a.cage[data-label="C-01"]').click();
    await page.locator('#census').waitFor();
    const alive = page.locator('.census-row[data-taxon="SLUG"] input[name=alive]');
    await savedAndRedrawn(page, async () => {
      await alive.fill('6');
      await alive.press('Tab');
    });
    await page.waitForFunction(() => Number(document.querySelector('#sync-state .sync-pending')?.dataset.count) > 0);
    assert.ok((await headerPending(page)) > 0);

    await Promise.all([page.waitForResponse((r) => r.url().endsWith('/api/sync_now') && r.ok()), page.locator('#sync-now').click()]);
    await page.waitForFunction(() => document.querySelector('#sync-state .sync-pending')?.dataset.count === '0');
    assert.equal(await headerPending(page), 0);
    const last = page.locator('#sync-state .sync-last');
    assert.doesNotMatch(await last.textContent(), /Never/);
    assert.ok(!Number.isNaN(Date.parse(await last.getAttribute('data-at'))), 'a last-sync time');
    await screenshot(page, 'sync-after-sync-now');
    // The settings screen tells the same.
    await page.goto(`${server.url}#/settings`);
    await page.locator('#pending-count', { hasText: '0 change(s)' }).waitFor();
  } finally {
    await page.close();
    await server.stop();
  }
});

test('a conflict between two tablets is shown side by side and settled by using the other value', async () => {
  const target = sharedFolder();
  mkdirSync(target, { recursive: true });
  const a = await startServer(initDatabase(DEFINITION, 'north'), { today: TODAY, syncEvery: 0 });
  const b = await startServer(initDatabase(DEFINITION, 'south'), { today: TODAY, syncEvery: 0 });
  const page = await browser.newPage({ viewport: { width: 1280, height: 900 } });
  try {
    await api(a.url, 'save_settings', { device_name: 'Tablet North', sync_target: target });
    await api(b.url, 'save_settings', { device_name: 'Tablet South', sync_target: target });
    const route = await api(a.url, 'route');
    const cage = route.blocks[0].cages[0].enclosure_id;
    const sheet = await api(a.url, 'sheet', { enclosure_id: cage });
    const slug = sheet.animals.find((x) => x.taxon.code === 'SLUG').taxon.id;
    const census = (alive) => ({ enclosure_id: cage, taxon_id: slug, alive, dead: 0, missing: 0 });
    await api(a.url, 'save_census', census(4));
    for (const s of [a, b, a]) await api(s.url, 'sync_now');
    // Both change the count without seeing each other's change.
    await api(a.url, 'save_census', census(5));
    await api(b.url, 'save_census', census(6));
    await api(a.url, 'sync_now');
    await api(b.url, 'sync_now');

    await page.goto(`${b.url}#/route`);
    await page.locator('#sync-state .sync-conflicts[data-count="1"]').click();
    const card = page.locator('li.conflict[data-field="alive"]');
    await card.waitFor();
    const mine = card.locator('.version[data-local="true"] .value');
    const theirs = card.locator('.version[data-local="false"] .value');
    assert.equal(await mine.textContent(), '6');
    assert.equal(await theirs.textContent(), '5');
    assert.match(await card.locator('.version[data-local="false"] small').textContent(), /Tablet North/);
    await screenshot(page, 'sync-conflict');

    await Promise.all([page.waitForResponse((r) => r.url().endsWith('/api/conflicts')), card.locator('button.take-theirs').click()]);
    await page.locator('#conflict-count', { hasText: 'Nothing to review' }).waitFor();
    const after = await api(b.url, 'sheet', { enclosure_id: cage });
    assert.equal(after.animals.find((x) => x.taxon.id === slug).today.alive, 5);
    assert.equal((await api(b.url, 'sync_status')).open_conflicts, 0);
  } finally {
    await page.close();
    await a.stop();
    await b.stop();
  }
});
