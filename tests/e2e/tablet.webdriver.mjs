// The tablet app end to end, through WebDriver: tauri-driver (crates.io) in
// front of Debian's WebKitWebDriver, under Xvfb. Open the app on the demo
// season, record a census and a cover value, quit, relaunch, find both.
//
// Run by scripts/test.sh as: xvfb-run node --test tests/e2e/tablet.webdriver.mjs
// with TAURI_DRIVER and FIELDCAGE_TABLET set.

import { test, after } from 'node:test';
import assert from 'node:assert/strict';
import { spawn } from 'node:child_process';
import { mkdtempSync, writeFileSync, mkdirSync, readFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { ARTIFACTS } from './harness.mjs';

const DRIVER = process.env.TAURI_DRIVER ?? 'tauri-driver';
const APP = process.env.FIELDCAGE_TABLET;
const PORT = 4444 + (process.pid % 1000) * 2;
// WebKitWebDriver's own port, per run too: a driver left over from another
// run must not hold it.
const NATIVE_PORT = PORT + 1;
const ELEMENT = 'element-6066-11e4-a52e-4f735466cecf';
const home = mkdtempSync(join(tmpdir(), 'fieldcage-tablet-'));
mkdirSync(join(home, 'data'), { recursive: true });

// An isolated data folder: the app never sees the tester's own data.
const driver = spawn(DRIVER, ['--port', String(PORT), '--native-port', String(NATIVE_PORT)], {
  stdio: ['ignore', 'inherit', 'inherit'],
  env: { ...process.env, XDG_DATA_HOME: join(home, 'data'), XDG_CONFIG_HOME: join(home, 'config'), XDG_CACHE_HOME: join(home, 'cache') },
  // Its own process group, which WebKitWebDriver and the app join.
  detached: true,
});
// tauri-driver starts WebKitWebDriver; end the whole group, whatever state
// its processes are in (killing tauri-driver alone left WebKitWebDriver
// running, holding its port).
after(() => {
  try {
    process.kill(-driver.pid, 'SIGKILL');
  } catch {
    driver.kill('SIGKILL');
  }
});

async function wd(method, path, body) {
  const r = await fetch(`http://127.0.0.1:${PORT}${path}`, {
    method,
    headers: { 'Content-Type': 'application/json' },
    body: body === undefined ? undefined : JSON.stringify(body),
  });
  const json = await r.json();
  if (!r.ok) throw new Error(`${method} ${path}: ${JSON.stringify(json.value)}`);
  return json.value;
}

async function waitForDriver() {
  for (let i = 0; i < 100; i++) {
    try {
      await fetch(`http://127.0.0.1:${PORT}/status`);
      return;
    } catch {
      await new Promise((r) => setTimeout(r, 100));
    }
  }
  throw new Error('tauri-driver did not start');
}

async function launch(db) {
  const session = await wd('POST', '/session', {
    capabilities: { alwaysMatch: { 'tauri:options': { application: APP, args: ['--db', db, '--demo', '--today', '2026-06-01'] } } },
  });
  const id = session.sessionId;
  const s = {
    id,
    async find(css, timeoutMs = 20_000) {
      const end = Date.now() + timeoutMs;
      for (;;) {
        try {
          const found = await wd("POST", `/session/${id}/element`, { using: "css selector", value: css });
          if (!found?.[ELEMENT]) throw new Error(`no element id in ${JSON.stringify(found)}`);
          return found[ELEMENT];
        } catch (e) {
          if (Date.now() > end) throw e;
          await new Promise((r) => setTimeout(r, 200));
        }
      }
    },
    click: async (css) => wd('POST', `/session/${id}/element/${await s.find(css)}/click`, {}),
    run: (script, args = []) => wd('POST', `/session/${id}/execute/sync`, { script, args }),
    async until(script, what, timeoutMs = 20_000) {
      const end = Date.now() + timeoutMs;
      while (!(await s.run(script))) {
        if (Date.now() > end) throw new Error(`timed out waiting for ${what}`);
        await new Promise((r) => setTimeout(r, 200));
      }
    },
    screenshot: async (name) => writeFileSync(join(ARTIFACTS, `${name}.png`), Buffer.from(await wd('GET', `/session/${id}/screenshot`), 'base64')),
    quit: () => wd('DELETE', `/session/${id}`),
  };
  return s;
}

/** Type a value into an input and leave it, as a person would. */
const ENTER = `const el = document.querySelector(arguments[0]); el.focus(); el.value = arguments[1];
  el.dispatchEvent(new Event('input', { bubbles: true })); el.dispatchEvent(new Event('change', { bubbles: true })); return true;`;
const SAVED = `return document.getElementById('save-state').textContent.includes('All saved') && document.querySelector('.notice.show') !== null;`;

async function openCage(s, label) {
  await s.click(`a.cage[data-label="${label}"]`);
  await s.find('#census');
}

test('the tablet app keeps a census and a cover value across a relaunch', async () => {
  assert.ok(APP, 'FIELDCAGE_TABLET names the built app');
  await waitForDriver();
  const db = join(home, 'tablet.db');

  const started = Date.now();
  let s = await launch(db);
  try {
    await s.find('a.cage');
    // Cold start to the first rendered route, WebDriver session set-up included
    // (the first launch also builds the demo season into the new database).
    const ms = Date.now() - started;
    writeFileSync(join(ARTIFACTS, 'tablet-start.json'), JSON.stringify({ launch_to_route_ms: ms }, null, 2));
    console.log(`tablet app: launch to first rendered route ${ms} ms`);
    await s.screenshot('tablet-route');
    await openCage(s, 'C-04');
    await s.run(ENTER, ['.census-row[data-taxon="BEET"] input[name=alive]', '2']);
    await s.until(SAVED, 'the census to be saved');
    await s.run('document.querySelector(".notice").classList.remove("show"); return true;');
    await s.until(`return document.querySelector('.census-row[data-taxon="BEET"] input[name=alive]')?.value === '2';`, 'the redraw');
    // Day 21 has no cover survey due: recording one is an explicit choice.
    await s.click('#unscheduled-cover');
    await s.find('.cover-row[data-target="SED1"] input');
    await s.run(ENTER, ['.cover-row[data-target="SED1"] input', '12.5']);
    await s.until(SAVED, 'the cover value to be saved');
    await s.until(`return document.querySelector('.cover-row[data-target="SED1"] small')?.textContent === '12.5 %';`, 'the cover redraw');
    await s.screenshot('tablet-sheet');
  } finally {
    await s.quit();
  }

  const relaunched = Date.now();
  s = await launch(db);
  try {
    await s.find('a.cage');
    const warm = Date.now() - relaunched;
    const first = JSON.parse(readFileSync(join(ARTIFACTS, 'tablet-start.json'), 'utf8'));
    writeFileSync(join(ARTIFACTS, 'tablet-start.json'), JSON.stringify({ ...first, relaunch_to_route_ms: warm }, null, 2));
    console.log(`tablet app: relaunch (database exists) to first rendered route ${warm} ms`);
    await openCage(s, 'C-04');
    const found = await s.run(`return {
      alive: document.querySelector('.census-row[data-taxon="BEET"] input[name=alive]').value,
      cover: document.querySelector('.cover-row[data-target="SED1"] input').value,
    };`);
    assert.deepEqual(found, { alive: '2', cover: '12.5' });
    await s.screenshot('tablet-sheet-after-relaunch');
  } finally {
    await s.quit();
  }
});
