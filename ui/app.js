// fieldcage tablet UI: the shell (where am I, is everything saved, sync state),
// the hash router and the save feedback with undo and history.

import { call, Problem } from './api.js';
import { h, clear } from './dom.js';
import { showRoute } from './route.js';
import { showSheet } from './sheet.js';
import { showReview } from './review.js';
import { showResults } from './results.js';
import { showSettings } from './settings.js';
import { showConflicts } from './conflicts.js';
import { refreshSyncState, watchSync } from './sync.js';

const main = document.getElementById('main');
const where = document.getElementById('where');
const saveState = document.getElementById('save-state');
const notice = document.getElementById('notice');

export const app = {
  overview: null,
  observer: localStorage.getItem('fieldcage-observer') ?? '',
  pending: 0,
  failed: false,
  /** The field day shown (YYYY-MM-DD); empty = the server's today. */
  date: new URLSearchParams(location.search).get('date') ?? '',
};

export function setWhere(...parts) {
  clear(where, parts.filter(Boolean).join(' · '));
}

function paintSaveState() {
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
  try {
    const context = {};
    if (DATED.has(op)) context.date = app.date || undefined;
    if (OBSERVED.has(op)) context.observer = app.observer || undefined;
    const result = await call(op, { ...context, ...args });
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
    refreshSyncState();
  }
}

export function problemText(e) {
  if (e instanceof Problem) return e.field ? `${e.message}` : e.message;
  return String(e);
}

let toastTimer = null;
/** Feedback after a save, with Undo and History for the record. */
export function toast(text, record, isError = false) {
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

async function showHistory(table, id) {
  setWhere(app.overview?.site, 'History');
  const changes = await call('history', { table, id });
  clear(
    main,
    h('button', { class: 'back', onclick: () => history.back() }, '← Back'),
    h('h2', {}, `History of this ${table.replace('_', ' ')}`),
    h(
      'ol',
      { class: 'history' },
      changes.map((c) =>
        h(
          'li',
          {},
          h('span', { class: 'when' }, c.at.replace('T', ' ').replace('Z', ' UTC')),
          ' ',
          h('strong', {}, c.op === 'delete' ? 'deleted' : c.field),
          c.op === 'delete' ? '' : ` ${c.old === null ? '(empty)' : c.old} → ${c.new === null ? '(empty)' : c.new}`,
        ),
      ),
    ),
  );
}

function settings() {
  const input = h('input', {
    id: 'observer',
    value: app.observer,
    autocomplete: 'name',
    placeholder: 'Your name or initials',
    onchange: (e) => {
      app.observer = e.target.value.trim();
      localStorage.setItem('fieldcage-observer', app.observer);
    },
  });
  return h('label', { class: 'observer' }, 'Observer ', input);
}

export async function render() {
  const [, view, a, b] = (location.hash || '#/route').split('/');
  try {
    if (!app.overview) app.overview = await call('overview', { date: app.date || undefined });
    if (view === 'cage' && a) await showSheet(main, a);
    else if (view === 'history' && a && b) await showHistory(a, b);
    else if (view === 'review') await showReview(main);
    else if (view === 'results') await showResults(main);
    else if (view === 'settings') await showSettings(main);
    else if (view === 'conflicts') await showConflicts(main);
    else await showRoute(main, settings());
  } catch (e) {
    clear(main, h('p', { class: 'problem', role: 'alert' }, problemText(e)));
  }
}

watchSync();
addEventListener('hashchange', render);
paintSaveState();
render();
