// fieldcage tablet UI: the shell every screen imports — the shared state
// (`app`), where am I, the save feedback with undo and history, the hash
// router the screens register with, and `bus`, an EventTarget for news that
// other modules listen to. It imports no screen and runs nothing on import:
// `start()` (called by main.js) wires it to the page.
//
// Events on `bus`:
//   'save-ended'  after every save, done or refused; detail { op, ok }.

import { call, Problem } from './api.js';
import { h, clear } from './dom.js';

export const bus = new EventTarget();

export const app = {
  overview: null,
  observer: '',
  pending: 0,
  failed: false,
  /** The field day shown (YYYY-MM-DD); empty = the server's today. */
  date: '',
};

const byId = (id) => document.getElementById(id);

export function setWhere(...parts) {
  clear(byId('where'), parts.filter(Boolean).join(' · '));
}

function paintSaveState() {
  const saveState = byId('save-state');
  saveState.className = 'save-state';
  if (app.pending > 0) {
    saveState.classList.add('saving');
    saveState.textContent = 'Saving…';
  } else if (app.failed) {
    saveState.classList.add('failed');
    saveState.textContent = 'Last entry NOT saved';
  } else {
    saveState.classList.add('saved');
    saveState.textContent = 'All saved ✓';
  }
}

/** Operations that take the field day, and those that record who observed. */
const DATED = new Set(['start_visit', 'save_census', 'save_stocking', 'save_cover', 'save_damage', 'tag_leaf', 'set_leaf_fate']);
const OBSERVED = new Set(['start_visit', 'save_census', 'save_stocking', 'save_cover', 'save_damage']);

/**
 * Save through the operation set. The entry is shown as saved only when the
 * promise resolves, which happens after the database commit.
 */
export async function save(op, args, { label, table } = {}) {
  app.pending += 1;
  paintSaveState();
  let ok = false;
  try {
    const context = {};
    if (DATED.has(op)) context.date = app.date || undefined;
    if (OBSERVED.has(op)) context.observer = app.observer || undefined;
    const result = await call(op, { ...context, ...args });
    ok = true;
    app.failed = false;
    const record = result.record ?? result;
    if (label) toast(`Saved: ${label}`, table && record.id ? { table, id: record.id } : null);
    return result;
  } catch (e) {
    app.failed = true;
    toast(problemText(e), null, true);
    throw e;
  } finally {
    app.pending -= 1;
    paintSaveState();
    bus.dispatchEvent(new CustomEvent('save-ended', { detail: { op, ok } }));
  }
}

export function problemText(e) {
  if (e instanceof Problem) return e.field ? `${e.message}` : e.message;
  return String(e);
}

let toastTimer = null;
/** Feedback after a save, with Undo and History for the record. */
export function toast(text, record, isError = false) {
  const notice = byId('notice');
  clearTimeout(toastTimer);
  const actions = [];
  if (record) {
    actions.push(
      h('button', { class: 'link', onclick: () => undo(record) }, 'Undo'),
      h('button', { class: 'link', onclick: () => (location.hash = `#/history/${record.table}/${record.id}`) }, 'History'),
    );
  }
  clear(notice, h('span', {}, text), actions);
  notice.className = isError ? 'notice error show' : 'notice show';
  notice.setAttribute('role', isError ? 'alert' : 'status');
  toastTimer = setTimeout(() => notice.classList.remove('show'), isError ? 12000 : 8000);
}

async function undo(record) {
  try {
    const result = await save('undo', record);
    toast(result.action === 'deleted' ? 'Entry removed' : `Restored ${result.fields.join(', ')}`);
    await render();
  } catch {
    /* the toast already says why */
  }
}

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

/** Show the screen the hash names (the route when it names none). */
export async function render() {
  const main = byId('main');
  const [, view, ...parts] = (location.hash || `#/${HOME}`).split('/');
  try {
    if (!app.overview) app.overview = await call('overview', { date: app.date || undefined });
    const screen = screens.get(view);
    const given = parts.slice(0, screen?.params ?? 0);
    if (screen && given.length === screen.params && given.every(Boolean)) await screen.show(main, ...given);
    else await screens.get(HOME)?.show(main);
  } catch (e) {
    clear(main, h('p', { class: 'problem', role: 'alert' }, problemText(e)));
  }
}

/** Wire the shell to the page: the observer and day asked for, the hash, the save state; then show. */
export function start() {
  app.observer = localStorage.getItem('fieldcage-observer') ?? '';
  app.date = new URLSearchParams(location.search).get('date') ?? '';
  addEventListener('hashchange', render);
  paintSaveState();
  return render();
}
