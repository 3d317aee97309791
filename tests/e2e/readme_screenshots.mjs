// The README's screenshots of the route and a cage sheet, taken from the demo
// as the run command opens it (day 21 at 09:45, cages still due). Not a test:
// run it by hand after a change to the screens, then commit the pictures.
//   node tests/e2e/readme_screenshots.mjs   (after `cargo build`)

import { mkdtempSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { api, launchBrowser, ROOT, startServer } from './harness.mjs';

const db = join(mkdtempSync(join(tmpdir(), 'fieldcage-shots-')), 'field-day.db');
const server = await startServer(db, { demo: true, today: '2026-06-01' });
const browser = await launchBrowser();
try {
  const page = await browser.newPage({ viewport: { width: 1024, height: 1366 } });
  await page.goto(`${server.url}#/route`);
  await page.locator('#observer').fill('crew-A');
  await page.locator('#observer').press('Tab');
  await page.locator('a.cage').first().waitFor();
  await page.locator('button[data-filter="left"]').click();
  await page.locator('button[data-filter="left"][aria-pressed="true"]').waitFor();
  await page.screenshot({ path: join(ROOT, 'docs', 'screenshots', 'route.png') });
  // The first cage still to do, with its census half entered.
  const cage = (await api(server.url, 'route', {})).blocks.flatMap((b) => b.cages).find((c) => c.state === 'not_started' && c.treatment_code === 'SB');
  await page.goto(`${server.url}#/cage/${cage.enclosure_id}`);
  const alive = page.locator('.census-row[data-taxon="SLUG"] input[name=alive]');
  await alive.fill('6');
  await alive.press('Tab');
  await page.waitForFunction(() => document.getElementById('save-state').textContent.includes('All saved'));
  await page.locator('.census-row[data-taxon="SLUG"] input[name=dead]').fill('1');
  await page.locator('#notice').evaluate((n) => n.classList.remove('show'));
  await page.screenshot({ path: join(ROOT, 'docs', 'screenshots', 'cage-sheet.png') });
} finally {
  await browser.close();
  await server.stop();
}
