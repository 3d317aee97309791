// The UI's modules as a graph of their imports: no import circle, the shell
// and the helpers import no screen, and only the entry module (the one
// index.html loads) imports the screens, each of which registers itself with
// the shell. Then every module but the entry is loaded where there is no DOM
// at all (Node), and each screen alone in the browser: loading it draws
// nothing and calls no operation, and the shell can show it afterwards.

import { test } from 'node:test';
import assert from 'node:assert/strict';
import { copyFileSync, mkdtempSync, readdirSync, readFileSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { pathToFileURL } from 'node:url';
import { api, launchBrowser, ROOT, startServer } from './harness.mjs';

const UI = join(ROOT, 'ui');
/** The module with the shared state, the helpers and the register/render API. */
const SHELL = 'shell.js';
/** The screens: each registers itself with the shell under its view name. */
const SCREENS = ['route.js', 'sheet.js', 'history.js', 'review.js', 'results.js', 'settings.js', 'conflicts.js'];

/**
 * The relative modules a source imports: static `import … from '…'`,
 * `import '…'`, `export … from '…'` at the start of a line, and `import('…')`.
 */
function importsOf(source) {
  const found = [];
  const statement = /^[ \t]*(?:import|export)[ \t\n]+(?:[\w$\s{},*]+?[ \t\n]+from[ \t\n]*)?(['"])([^'"\n]+)\1/gm;
  const dynamic = /\bimport\s*\(\s*(['"])([^'"\n]+)\1\s*\)/g;
  for (const m of source.matchAll(statement)) found.push(m[2]);
  for (const m of source.matchAll(dynamic)) found.push(m[2]);
  return found;
}

/** Every ui/*.js module with the modules it imports, by file name. */
function moduleGraph() {
  const files = readdirSync(UI).filter((f) => f.endsWith('.js')).sort();
  const graph = new Map();
  for (const file of files) {
    const source = readFileSync(join(UI, file), 'utf8');
    const targets = importsOf(source).map((spec) => {
      assert.match(spec, /^\.\/[\w-]+\.js$/, `${file} imports ${spec}: only modules of ui/ beside it, named ./name.js`);
      const target = spec.slice(2);
      assert.ok(files.includes(target), `${file} imports ${spec}, which is not in ui/`);
      return target;
    });
    graph.set(file, { source, imports: [...new Set(targets)] });
  }
  return graph;
}

/** The first import circle found, as a list of modules, or null. */
function findCircle(graph) {
  const state = new Map();
  const path = [];
  const visit = (file) => {
    state.set(file, 'open');
    path.push(file);
    for (const next of graph.get(file).imports) {
      if (state.get(next) === 'open') return [...path.slice(path.indexOf(next)), next];
      if (!state.has(next)) {
        const circle = visit(next);
        if (circle) return circle;
      }
    }
    path.pop();
    state.set(file, 'done');
    return null;
  };
  for (const file of graph.keys()) {
    if (!state.has(file)) {
      const circle = visit(file);
      if (circle) return circle;
    }
  }
  return null;
}

/** The module index.html loads. */
function entryModule() {
  const html = readFileSync(join(UI, 'index.html'), 'utf8');
  const scripts = [...html.matchAll(/<script\b[^>]*>/g)].map((m) => m[0]);
  assert.equal(scripts.length, 1, `index.html loads one script: ${scripts.join(' ')}`);
  const m = /type="module"[^>]*src="([\w-]+\.js)"/.exec(scripts[0]);
  assert.ok(m, `the script of index.html is a module: ${scripts[0]}`);
  return m[1];
}

test('the import reader finds each kind of import and nothing else', () => {
  const source = [
    "import { a, b as c } from './one.js';",
    'import d, {',
    '  e,',
    '} from "./two.js";',
    "import './three.js';",
    "export { f } from './four.js';",
    "// import { g } from './commented.js';",
    "const five = () => import('./five.js');",
    "export const text = 'from ./nothing.js';",
  ].join('\n');
  assert.deepEqual(importsOf(source), ['./one.js', './two.js', './three.js', './four.js', './five.js']);
});

test('every ui module imports only ui modules, and the imports make no circle', () => {
  const graph = moduleGraph();
  const circle = findCircle(graph);
  assert.equal(circle, null, `import circle: ${circle?.join(' → ')}`);
  for (const file of [SHELL, ...SCREENS]) assert.ok(graph.has(file), `ui/${file} exists`);
});

test('the screens register with the shell; only the entry imports a screen', () => {
  const graph = moduleGraph();
  const entry = entryModule();
  const registering = [...graph].filter(([, m]) => /^[ \t]*register\(\s*['"]/m.test(m.source)).map(([f]) => f);
  for (const screen of SCREENS) assert.ok(registering.includes(screen), `${screen} registers itself with the shell`);
  assert.ok(!registering.includes(SHELL) && !registering.includes(entry), 'the shell and the entry register no screen themselves');
  for (const screen of registering) {
    assert.ok(graph.get(screen).imports.includes(SHELL), `${screen} imports the shell it registers with`);
    assert.ok(graph.get(entry).imports.includes(screen), `the entry ${entry} imports ${screen}`);
  }
  for (const [file, m] of graph) {
    if (file === entry) continue;
    const screensImported = m.imports.filter((f) => registering.includes(f));
    assert.deepEqual(screensImported, [], `${file} imports no screen`);
    assert.ok(!m.imports.includes(entry), `${file} does not import the entry ${entry}`);
  }
  assert.ok(!graph.get(SHELL).imports.some((f) => registering.includes(f) || f === entry), 'the shell imports no screen');
});

test('every module but the entry loads where there is no DOM (nothing runs on import)', async () => {
  // A copy of ui/ beside a package.json that makes Node read .js as ES modules.
  const dir = mkdtempSync(join(tmpdir(), 'fieldcage-ui-'));
  writeFileSync(join(dir, 'package.json'), '{"type": "module"}\n');
  for (const file of readdirSync(UI).filter((f) => f.endsWith('.js'))) copyFileSync(join(UI, file), join(dir, file));
  assert.equal(typeof globalThis.document, 'undefined', 'Node has no document');
  const entry = entryModule();
  const failures = [];
  for (const file of readdirSync(dir).filter((f) => f.endsWith('.js') && f !== entry).sort()) {
    try {
      await import(pathToFileURL(join(dir, file)).href);
    } catch (e) {
      failures.push(`${file}: ${e}`);
    }
  }
  assert.deepEqual(failures, []);
  const shell = await import(pathToFileURL(join(dir, SHELL)).href);
  for (const name of ['app', 'bus', 'register', 'render', 'save', 'setWhere', 'toast', 'problemText']) {
    assert.ok(name in shell, `the shell exports ${name}`);
  }
  assert.ok(shell.bus instanceof EventTarget, 'the bus is an EventTarget');
});

// After the last planned visit of the demo season (day 30 + 1 grace day).
const AFTER_SEASON = '2026-06-11';

test('each screen loaded alone in the browser draws nothing until the shell shows it', async () => {
  const browser = await launchBrowser();
  const db = join(mkdtempSync(join(tmpdir(), 'fieldcage-modules-')), 'demo.db');
  const server = await startServer(db, { demo: true, today: AFTER_SEASON });
  try {
    const route = await api(server.url, 'route', { date: AFTER_SEASON });
    const cage = route.blocks[0].cages[0].enclosure_id;
    const sheet = await api(server.url, 'sheet', { enclosure_id: cage, date: AFTER_SEASON });
    const saved = await api(server.url, 'save_census', { enclosure_id: cage, taxon_id: sheet.animals[0].taxon.id, alive: 3, date: AFTER_SEASON });
    const census = (saved.record ?? saved).id;
    // Where each screen is shown, and an element that only it draws.
    const shows = {
      'route.js': ['#/route', 'section.route-head h1'],
      'sheet.js': [`#/cage/${cage}`, '#census'],
      'history.js': [`#/history/census/${census}`, 'ol.history li'],
      'review.js': ['#/review', '#review-progress'],
      'results.js': ['#/results', '#results-cover'],
      'settings.js': ['#/settings', '#device-name'],
      'conflicts.js': ['#/conflicts', '#conflict-count'],
    };
    assert.deepEqual(Object.keys(shows).sort(), [...SCREENS].sort());

    for (const screen of SCREENS) {
      const [hash, drawn] = shows[screen];
      const page = await browser.newPage({ viewport: { width: 1280, height: 900 } });
      const errors = [];
      const calls = [];
      page.on('pageerror', (e) => errors.push(String(e)));
      page.on('request', (r) => {
        const path = new URL(r.url()).pathname;
        if (path.startsWith('/api/')) calls.push(path.slice(5));
      });
      // index.html as served, less the entry module: the header and <main> are
      // there, and nothing has been imported.
      let stripped = false;
      await page.route(
        (url) => url.pathname === '/',
        async (r) => {
          const response = await r.fetch();
          const html = await response.text();
          const body = html.replace(/<script\b[^>]*><\/script>\n?/, '');
          stripped = body !== html && !body.includes('<script');
          await r.fulfill({ response, body });
        },
      );
      try {
        await page.goto(`${server.url}${hash}`);
        assert.ok(stripped, 'the page is index.html without its entry module');
        const before = await page.evaluate(() => document.body.innerHTML);
        assert.match(before, /<main id="main"><p>Loading…<\/p><\/main>/);

        const exported = await page.evaluate((src) => import(src).then((m) => Object.keys(m)), `/${screen}`);
        assert.ok(exported.length > 0, `${screen} exports its screen`);
        // Time for anything an import might have started (a call, a render).
        await page.waitForTimeout(500);
        assert.deepEqual(calls, [], `loading ${screen} alone calls no operation`);
        assert.equal(await page.evaluate(() => document.body.innerHTML), before, `loading ${screen} alone draws nothing`);
        assert.deepEqual(errors, [], `loading ${screen} alone throws nothing`);

        // The screen registered itself: the shell alone can show it.
        await page.evaluate(() => import('/shell.js').then((shell) => shell.render()));
        await page.locator(drawn).first().waitFor({ timeout: 15_000 });
        assert.ok(calls.includes('overview'), `the shell read the overview to show ${screen}`);
        assert.equal(await page.locator('#main .problem').count(), 0, `${screen} shown without a problem`);
        assert.deepEqual(errors, [], `showing ${screen} throws nothing`);
      } finally {
        await page.close();
      }
    }
  } finally {
    await server.stop();
    await browser.close();
  }
});
