// fieldcage tablet UI: the shell every screen imports — the shared state
// (`app`), where am I, the save feedback with undo and history, the outbox
// that keeps every save until fieldcage has it, the hash router the screens
// register with, and `bus`, an EventTarget for news that other modules
// listen to. It imports no screen and runs nothing on import: `start()`
// (called by main.js) wires it to the page.
//
// Events on `bus`:
//   'save-ended'  after every save, done or refused; detail { op, ok }.
//   'delivered'   an entry that waited in the outbox has been saved.

import { call, Problem } from './api.js';
import { h, clear } from './dom.js';

export const bus = new EventTarget();

export const app = {
  overview: null,
  observer: '',
  /** Requests sent and not answered yet. */
  pending: 0,
  failed: false,
  /** The last attempt to send found fieldcage unreachable (the outbox waits). */
  offline: false,
  /** The field day shown (YYYY-MM-DD); empty = the server's today. */
  date: '',
  /** Fields typed into and not saved yet: key → save-now function. */
  dirty: new Map(),
  /** Counts up on every screen shown: a late answer for an old screen paints nothing. */
  view: 0,
};

const byId = (id) => document.getElementById(id);

export function setWhere(...parts) {
  clear(byId('where'), parts.filter(Boolean).join(' · '));
}

// ---------------------------------------------------------------- outbox --

const OUTBOX_KEY = 'fieldcage-outbox';

/** Saves not yet confirmed by fieldcage, oldest first, as kept in localStorage. */
function readOutbox() {
  try {
    const list = JSON.parse(localStorage.getItem(OUTBOX_KEY) ?? '[]');
    return Array.isArray(list) ? list : [];
  } catch {
    return [];
  }
}

function writeOutbox(list) {
  localStorage.setItem(OUTBOX_KEY, JSON.stringify(list));
}

/** How many entries wait in the outbox. */
export function waiting() {
  return readOutbox().length;
}

/** A new operation id: a UUIDv7 (48-bit milliseconds, version 7, variant 10). */
export function newOpId() {
  const bytes = crypto.getRandomValues(new Uint8Array(16));
  let ms = Date.now();
  for (let i = 5; i >= 0; i--) {
    bytes[i] = ms % 256;
    ms = Math.floor(ms / 256);
  }
  bytes[6] = 0x70 | (bytes[6] & 0x0f);
  bytes[8] = 0x80 | (bytes[8] & 0x3f);
  const hex = [...bytes].map((b) => b.toString(16).padStart(2, '0')).join('');
  return `${hex.slice(0, 8)}-${hex.slice(8, 12)}-${hex.slice(12, 16)}-${hex.slice(16, 20)}-${hex.slice(20)}`;
}

/** fieldcage did not answer (the local service is down or restarting). */
function unreachable(e) {
  return e instanceof Problem && e.code === 'offline';
}

let retryTimer = null;
let retryDelay = 1000;
let delivering = null;
/**
 * The screens waiting for an answer: entry id → { entry, label, table,
 * resolve, reject, queued }. `queued`: the screen was told the entry waits; its
 * answer, when it comes, is news for the whole app ('delivered').
 */
const waiters = new Map();

/**
 * Send what waits in the outbox, oldest first, each with its own operation
 * id (fieldcage answers a repeat with the first answer and writes nothing).
 * Stops at the first entry fieldcage cannot be reached for, and tries again
 * later; an entry fieldcage refuses is dropped and its refusal shown.
 */
export function deliver() {
  if (delivering) return delivering;
  delivering = (async () => {
    clearTimeout(retryTimer);
    let late = 0;
    for (;;) {
      const [entry] = readOutbox();
      if (!entry) break;
      let outcome;
      app.pending += 1;
      paintSaveState();
      try {
        outcome = { ok: true, result: await call(entry.op, entry.args) };
      } catch (e) {
        outcome = { ok: false, error: e };
      } finally {
        app.pending -= 1;
      }
      if (!outcome.ok && unreachable(outcome.error)) {
        app.offline = true;
        for (const w of waiters.values()) {
          if (!w.queued) {
            w.queued = true;
            w.resolve({ queued: true });
          }
        }
        retryTimer = setTimeout(deliver, retryDelay);
        retryDelay = Math.min(retryDelay * 2, 15000);
        break;
      }
      app.offline = false;
      retryDelay = 1000;
      writeOutbox(readOutbox().filter((e) => e.id !== entry.id));
      const waiter = waiters.get(entry.id);
      waiters.delete(entry.id);
      const label = waiter?.label ?? entry.label ?? entry.op;
      if (outcome.ok) {
        app.failed = false;
        if (waiter && !waiter.queued) {
          const record = outcome.result.record ?? outcome.result;
          if (waiter.label) toast(`Saved: ${label}`, waiter.table && record.id ? { table: waiter.table, id: record.id } : null);
          waiter.resolve(outcome.result);
        } else {
          late += 1;
          toast(`Saved (it had waited): ${label}`);
        }
      } else {
        app.failed = true;
        if (waiter && !waiter.queued) {
          toast(problemText(outcome.error), null, true);
          waiter.reject(outcome.error);
        } else {
          late += 1;
          toast(`Not saved: ${label} — ${problemText(outcome.error)}`, null, true);
        }
      }
      bus.dispatchEvent(new CustomEvent('save-ended', { detail: { op: entry.op, ok: outcome.ok } }));
    }
    // Another tab on this device shares the outbox and may have sent one of
    // this tab's entries: ask again for its answer (an operation with an id
    // is answered from its receipt and writes nothing).
    if (!app.offline) {
      const kept = new Set(readOutbox().map((e) => e.id));
      for (const [id, w] of waiters) {
        if (w.queued || kept.has(id)) continue;
        waiters.delete(id);
        if (!ONCE.has(w.entry.op)) {
          w.resolve({});
          continue;
        }
        try {
          w.resolve(await call(w.entry.op, w.entry.args));
        } catch (e) {
          toast(problemText(e), null, true);
          w.reject(e);
        }
      }
    }
    delivering = null;
    paintSaveState();
    if (late) bus.dispatchEvent(new CustomEvent('delivered', { detail: { late } }));
    // An entry saved while this round was finishing: send it now.
    if (!app.offline && readOutbox().length > 0) deliver();
  })();
  return delivering;
}

// ------------------------------------------------------------ save state --

function paintSaveState() {
  const saveState = byId('save-state');
  if (!saveState) return;
  const queued = waiting();
  saveState.className = 'save-state';
  if (queued > 0 && app.offline) {
    saveState.classList.add('waiting');
    saveState.textContent = `${queued} waiting: fieldcage not reachable, trying again`;
  } else if (app.pending > 0 || queued > 0) {
    saveState.classList.add('saving');
    saveState.textContent = queued > 1 ? `Saving ${queued}…` : 'Saving…';
  } else if (app.dirty.size > 0) {
    saveState.classList.add('dirty');
    saveState.textContent = 'Not saved yet: finish the entry';
  } else if (app.failed) {
    saveState.classList.add('failed');
    saveState.textContent = 'Last entry NOT saved';
  } else {
    saveState.classList.add('saved');
    saveState.textContent = 'All saved ✓';
  }
}

/**
 * Count `work` (a redraw after a save) as not yet settled: the header says
 * "All saved" only once the screen shows what is stored.
 */
export async function whileRedrawing(work) {
  app.pending += 1;
  paintSaveState();
  try {
    return await work;
  } finally {
    app.pending -= 1;
    paintSaveState();
  }
}

/** A field was typed into (`saveNow` saves it) or is settled again (`null`). */
export function markDirty(key, saveNow) {
  if (saveNow) app.dirty.set(key, saveNow);
  else app.dirty.delete(key);
  paintSaveState();
}

/** Save every field typed into and not yet saved (before leaving a screen). */
export function saveDirty() {
  const pendingSaves = [...app.dirty.values()];
  app.dirty.clear();
  for (const saveNow of pendingSaves) saveNow();
  paintSaveState();
}

/** Operations that take the field day, and those that record who observed. */
const DATED = new Set(['start_visit', 'save_census', 'save_stocking', 'save_cover', 'save_damage', 'tag_leaf', 'set_leaf_fate']);
const OBSERVED = new Set(['start_visit', 'save_census', 'save_stocking', 'save_cover', 'save_damage']);
/** Operations that take an operation id (fieldcage answers a repeat from its receipt). */
const ONCE = new Set([...DATED, 'update_visit', 'delete_record', 'undo']);

/**
 * Save through the operation set. The entry goes into the outbox (kept in
 * localStorage, so a reload keeps it) before it is sent; it is shown as
 * saved only when fieldcage answers, which happens after the commit.
 * Resolves with the answer; with `{ queued: true }` when fieldcage cannot be
 * reached (the entry waits and is sent again with the same id); rejects with
 * the refusal.
 */
export function save(op, args, { label, table, opId } = {}) {
  const context = {};
  if (DATED.has(op)) context.date = app.date || undefined;
  if (OBSERVED.has(op)) context.observer = app.observer || undefined;
  const id = opId ?? newOpId();
  // The operations that keep an answer under the id send it (a repeat is
  // answered once); the others are kept in the outbox under it all the same.
  const entry = { id, op, args: { ...context, ...args, ...(ONCE.has(op) ? { op_id: id } : {}) }, label, at: new Date().toISOString() };
  const list = readOutbox();
  if (!list.some((e) => e.id === id)) writeOutbox([...list, entry]);
  return new Promise((resolve, reject) => {
    waiters.set(id, { entry, label, table, resolve, reject, queued: false });
    paintSaveState();
    deliver();
  });
}

export function problemText(e) {
  if (e instanceof Problem) return e.message;
  return String(e);
}

let toastTimer = null;
/** Feedback after a save, with Undo and History for the record. */
export function toast(text, record, isError = false) {
  const notice = byId('notice');
  clearTimeout(toastTimer);
  const actions = [];
  if (record) {
    const undoId = newOpId();
    actions.push(
      h('button', { class: 'link', onclick: (e) => { e.currentTarget.disabled = true; undo(record, undoId); } }, 'Undo'),
      h('button', { class: 'link', onclick: () => (location.hash = `#/history/${record.table}/${record.id}`) }, 'History'),
    );
  }
  clear(notice, h('span', {}, text), actions);
  notice.className = isError ? 'notice error show' : 'notice show';
  notice.setAttribute('role', isError ? 'alert' : 'status');
  toastTimer = setTimeout(() => notice.classList.remove('show'), isError ? 12000 : 8000);
}

async function undo(record, opId) {
  try {
    const result = await save('undo', record, { opId });
    if (result.queued) return;
    toast(result.action === 'deleted' ? 'Entry removed' : `Restored ${result.fields.join(', ')}`);
    await render();
  } catch {
    /* the toast already says why */
  }
}

// ---------------------------------------------------------------- router --

/** The screens by view name: how each is shown and how many parts of the hash it takes. */
const screens = new Map();
/** The view shown when the hash names none (or lacks what the screen needs). */
const HOME = 'route';

/**
 * A screen makes itself known: `#/<view>/<a>/<b>` calls `show(main, a, b)`
 * when the hash has the `params` parts the screen needs.
 */
export function register(view, show, params = 0) {
  if (screens.has(view)) throw new Error(`a screen is already registered as ${view}`);
  screens.set(view, { show, params });
}

/** Is the screen shown at `view` still the one on the page? */
export function current(view) {
  return view === app.view;
}

/** Working on another day than the server's today: say so, with a way back. */
function paintDayBanner() {
  const banner = byId('day-banner');
  if (!banner) return;
  const o = app.overview;
  if (!o || !app.date || app.date === o.today) {
    banner.hidden = true;
    clear(banner);
    return;
  }
  banner.hidden = false;
  clear(
    banner,
    h('span', {}, `Working on ${o.date} (day ${o.day}), not today (${o.today}).`),
    h('button', { class: 'small', id: 'back-to-today', onclick: () => goToDay('') }, 'Back to today'),
  );
}

/** Show another field day ('' = today) on the screen now shown. */
export function goToDay(date) {
  saveDirty();
  app.date = date;
  app.overview = null;
  const url = new URL(location.href);
  if (date) url.searchParams.set('date', date);
  else url.searchParams.delete('date');
  history.replaceState(null, '', url);
  return render();
}

/** Show the screen the hash names (the route when it names none). */
export async function render() {
  // A value typed and not yet saved is saved before the screen goes.
  saveDirty();
  const view = ++app.view;
  const main = byId('main');
  const [, name, ...parts] = (location.hash || `#/${HOME}`).split('/');
  try {
    if (!app.overview) app.overview = await call('overview', { date: app.date || undefined });
    if (view !== app.view) return;
    paintDayBanner();
    const screen = screens.get(name);
    const given = parts.slice(0, screen?.params ?? 0);
    if (screen && given.length === screen.params && given.every(Boolean)) await screen.show(main, ...given, view);
    else await screens.get(HOME)?.show(main, view);
  } catch (e) {
    if (view === app.view) clear(main, h('p', { class: 'problem', role: 'alert' }, problemText(e)));
  }
}

/** Wire the shell to the page: the observer and day asked for, the hash, the save state, the outbox; then show. */
export function start() {
  app.observer = localStorage.getItem('fieldcage-observer') ?? '';
  app.date = new URLSearchParams(location.search).get('date') ?? '';
  addEventListener('hashchange', render);
  // Leaving or reloading with a value typed and not saved: save it first
  // (into the outbox, which the next load sends).
  addEventListener('pagehide', saveDirty);
  addEventListener('beforeunload', saveDirty);
  addEventListener('online', deliver);
  bus.addEventListener('delivered', () => render());
  paintSaveState();
  const shown = render();
  if (waiting() > 0) deliver();
  return shown;
}
