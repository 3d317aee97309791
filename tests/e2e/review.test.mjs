// The crew lead's day's-end review in the browser: run the checks on the demo
// season, fix one flag by editing the value, confirm another with a note, and
// see the count of open flags drop by two.

import { test, after } from 'node:test';
import assert from 'node:assert/strict';
import { mkdtempSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { launchBrowser, savedAndRedrawn, screenshot, startServer } from './harness.mjs';

const browser = await launchBrowser();
after(() => browser.close());

// After the last planned visit of the demo season (day 30 + 1 grace day).
const AFTER_SEASON = '2026-06-11';

async function openReview(page, url) {
  await page.goto(`${url}?date=${AFTER_SEASON}#/review`);
  await page.locator('#review-progress').waitFor();
  const box = page.locator('label.toggle input');
  if (!(await box.isChecked())) {
    await Promise.all([page.waitForResponse((r) => r.url().endsWith('/api/review')), box.check()]);
  }
  await page.locator('#review-progress', { hasText: 'resolved' }).waitFor();
  return openCount(page);
}

async function openCount(page) {
  const text = await page.locator('#review-progress').textContent();
  const m = /· (\d+) open/.exec(text);
  assert.ok(m, text);
  return Number(m[1]);
}

test('fixing one flag and confirming another leaves two fewer open', async () => {
  const db = join(mkdtempSync(join(tmpdir(), 'fieldcage-review-')), 'demo.db');
  const server = await startServer(db, { demo: true, today: AFTER_SEASON });
  const page = await browser.newPage({ viewport: { width: 1280, height: 900 } });
  try {
    const before = await openReview(page, server.url);
    assert.ok(before >= 2, `open flags: ${before}`);
    await screenshot(page, 'review-before');

    // Confirm the duplicated census of C-24 with a note (demo_data/README.md).
    const duplicate = page.locator('li.flag.status-open[data-rule="visits.duplicate"][data-cage="C-24"]');
    await duplicate.locator('textarea').fill('Visited twice on purpose: the first count was interrupted by rain.');
    await Promise.all([page.waitForResponse((r) => r.url().endsWith('/api/review')), duplicate.locator('button.confirm').click()]);
    await page.locator('li.flag[data-rule="visits.duplicate"][data-cage="C-24"].status-confirmed').waitFor();
    assert.equal(await openCount(page), before - 1);

    // Fix the impossible count of C-08 on day 12 by editing it on the sheet.
    await page.locator('li.flag.status-open[data-rule="counts.too_many"][data-cage="C-08"] a.button').click();
    await page.locator('#census').waitFor();
    const alive = page.locator('.census-row[data-taxon="SLUG"] input[name=alive]');
    await savedAndRedrawn(page, async () => {
      await alive.fill('9');
      await alive.press('Tab');
    });
    assert.equal(await alive.inputValue(), '9');

    const after = await openReview(page, server.url);
    assert.equal(after, before - 2, 'one fixed by editing, one confirmed');
    await page.locator('li.flag[data-rule="counts.too_many"][data-cage="C-08"].status-fixed').waitFor();
    await screenshot(page, 'review-after');
  } finally {
    await page.close();
    await server.stop();
  }
});
