// Shared pieces of the browser tests: the fieldcage binary, databases made
// from variants of the demo definition, a server per database, and Debian's
// chromium driven by playwright-core (never a browser a tool downloads).

import { spawn, execFileSync } from 'node:child_process';
import { mkdtempSync, readFileSync, readdirSync, writeFileSync, mkdirSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join, resolve, dirname } from 'node:path';
import { fileURLToPath } from 'node:url';
import { chromium } from 'playwright-core';

export const ROOT = resolve(dirname(fileURLToPath(import.meta.url)), '..', '..');
export const BIN = process.env.FIELDCAGE_BIN ?? join(ROOT, 'target', 'debug', 'fieldcage');
export const ARTIFACTS = join(ROOT, 'test-artifacts', 'e2e');
mkdirSync(ARTIFACTS, { recursive: true });

/** The demo definition with its [cover] section set to a method. */
export function definitionWithCover(method) {
  const text = readFileSync(join(ROOT, 'demo_data', 'definition.toml'), 'utf8');
  const cover = {
    percent: 'method = "percent"',
    class: 'method = "class"\nscale = "daubenmire"',
    pins: 'method = "pins"\npins_per_frame = 10\nhit_rule = "first"',
  }[method];
  const out = text.replace('method = "percent"', cover);
  if (out === text && method !== 'percent') throw new Error('the demo definition changed: no percent cover method found');
  return out;
}

/** A new database initialised from a definition text; returns its path. */
export function initDatabase(definition, name) {
  const dir = mkdtempSync(join(tmpdir(), 'fieldcage-e2e-'));
  const defPath = join(dir, `${name}.toml`);
  writeFileSync(defPath, definition);
  const db = join(dir, `${name}.db`);
  execFileSync(BIN, ['init', '--db', db, defPath, '--seed', '5'], { stdio: 'pipe' });
  return db;
}

let nextPort = 18_700 + (process.pid % 500);

/** Start `fieldcage serve` on a database; resolves once it answers. */
export async function startServer(db, { today, demo = false, syncEvery, port: samePort } = {}) {
  const port = samePort ?? nextPort++;
  const args = ['serve', '--db', db, '--port', String(port)];
  if (today) args.push('--today', today);
  if (demo) args.push('--demo');
  if (syncEvery !== undefined) args.push('--sync-every', String(syncEvery));
  const child = spawn(BIN, args, { stdio: ['ignore', 'pipe', 'pipe'] });
  let output = '';
  child.stdout.on('data', (d) => (output += d));
  child.stderr.on('data', (d) => (output += d));
  const url = `http://127.0.0.1:${port}/`;
  for (let i = 0; i < 200; i++) {
    try {
      const r = await fetch(url);
      if (r.ok) return { url, port, child, stop: () => stopServer(child) };
    } catch {
      /* not up yet */
    }
    if (child.exitCode !== null) throw new Error(`fieldcage serve exited: ${output}`);
    await new Promise((r) => setTimeout(r, 100));
  }
  child.kill('SIGKILL');
  throw new Error(`fieldcage serve did not answer on ${url}: ${output}`);
}

function stopServer(child) {
  return new Promise((resolveStop) => {
    if (child.exitCode !== null) return resolveStop();
    child.once('exit', () => resolveStop());
    child.kill('SIGINT');
  });
}

/** Debian's chromium, headless, with nothing that reaches the network. */
export async function launchBrowser() {
  return chromium.launch({
    executablePath: process.env.CHROMIUM ?? '/usr/bin/chromium',
    args: ['--headless', '--no-sandbox', '--disable-gpu', '--no-first-run', '--disable-background-networking', '--disable-component-update', '--disable-sync'],
  });
}

/** Run `action` and wait until the sheet has been saved and redrawn. */
export async function savedAndRedrawn(page, action) {
  await Promise.all([page.waitForResponse((r) => r.url().endsWith('/api/sheet') && r.status() === 200), action()]);
  await page.waitForFunction(() => document.getElementById('save-state').textContent.includes('All saved'));
}

export async function screenshot(page, name) {
  await page.screenshot({ path: join(ARTIFACTS, `${name}.png`), fullPage: true });
}

/** Call an operation of a server's API directly (to set up a test). */
export async function api(url, op, args = {}) {
  const r = await fetch(`${url}api/${op}`, { method: 'POST', headers: { 'Content-Type': 'application/json' }, body: JSON.stringify(args) });
  const body = await r.json();
  if (!r.ok) throw new Error(`${op}: ${r.status} ${JSON.stringify(body)}`);
  return body;
}

/** One CSV text as rows of objects by header (RFC 4180 quoting). */
export function parseCsv(text) {
  const rows = [];
  let row = [];
  let field = '';
  let quoted = false;
  for (let i = 0; i < text.length; i++) {
    const c = text[i];
    if (quoted) {
      if (c === '"' && text[i + 1] === '"') {
        field += '"';
        i++;
      } else if (c === '"') quoted = false;
      else field += c;
    } else if (c === '"') quoted = true;
    else if (c === ',') {
      row.push(field);
      field = '';
    } else if (c === '\n' || c === '\r') {
      if (c === '\r' && text[i + 1] === '\n') i++;
      row.push(field);
      rows.push(row);
      row = [];
      field = '';
    } else field += c;
  }
  if (field !== '' || row.length) {
    row.push(field);
    rows.push(row);
  }
  const [header, ...body] = rows;
  return body.map((r) => Object.fromEntries(header.map((name, i) => [name, r[i] ?? ''])));
}

/** What is stored: `fieldcage export` of the database, every table as rows. */
export function exported(db) {
  const out = mkdtempSync(join(tmpdir(), 'fieldcage-e2e-export-'));
  execFileSync(BIN, ['export', '--db', db, '--out', out], { stdio: 'pipe' });
  const tables = {};
  for (const file of readdirSync(out).filter((f) => f.endsWith('.csv'))) {
    tables[file.replace(/\.csv$/, '')] = parseCsv(readFileSync(join(out, file), 'utf8'));
  }
  return tables;
}
