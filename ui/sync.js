// Sync in the header: when the last sync finished, how many changes wait to
// be sent, whether the browser has a network, open conflicts, and the
// "Sync now" button. The server syncs on its own when the sync folder is in
// reach; this only shows it and lets the crew start one. It reads the status
// again after every save (the shell's 'save-ended' event); `watchSync()`
// (called by main.js) wires it to the page, nothing runs on import.

import { call } from './api.js';
import { h, clear } from './dom.js';
import { bus, problemText, render, toast } from './shell.js';

/** The last status read, for the screens. */
export const sync = { status: null, running: false, lastOutcome: null };

/** Local clock time of an RFC 3339 time; the date too when not today. */
export function when(iso) {
  const d = new Date(iso);
  if (Number.isNaN(d.getTime())) return iso;
  const time = d.toLocaleTimeString([], { hour: '2-digit', minute: '2-digit' });
  return d.toDateString() === new Date().toDateString() ? time : `${d.toLocaleDateString()} ${time}`;
}

function plural(n, one, many) {
  return `${n} ${n === 1 ? one : many}`;
}

function paint() {
  const syncState = document.getElementById('sync-state');
  const syncNowButton = document.getElementById('sync-now');
  const s = sync.status;
  const parts = [];
  if (!navigator.onLine) parts.push(h('span', { class: 'sync-offline' }, 'No network'));
  if (!s) {
    parts.push(h('span', {}, 'Sync: …'));
  } else {
    if (s.target_state === 'not_set') parts.push(h('span', { class: 'sync-where' }, 'Sync folder not set'));
    else if (s.target_state === 'unavailable') parts.push(h('span', { class: 'sync-where away' }, 'Sync folder out of reach'));
    parts.push(
      h('span', { class: 'sync-last', dataset: { at: s.last_sync?.finished_at ?? '' } }, s.last_sync ? `Last sync ${when(s.last_sync.finished_at)}` : 'Never synced'),
      h('span', { class: 'sync-pending', dataset: { count: s.pending_changes } }, s.pending_changes ? `${plural(s.pending_changes, 'change', 'changes')} to send` : 'Nothing to send'),
    );
    if (s.open_conflicts) parts.push(h('a', { class: 'sync-conflicts', href: '#/conflicts', dataset: { count: s.open_conflicts } }, `${plural(s.open_conflicts, 'conflict', 'conflicts')} to review`));
  }
  syncState.className = `sync-state ${s?.target_state ?? ''} ${navigator.onLine ? '' : 'offline'}`;
  clear(syncState, parts.map((p, i) => (i ? [' · ', p] : p)));
  syncNowButton.disabled = sync.running || !s || s.target_state === 'not_set';
  syncNowButton.textContent = sync.running ? 'Syncing…' : 'Sync now';
}

let refreshing = null;
/** Read the sync status again and repaint the header. */
export function refreshSyncState() {
  refreshing ??= call('sync_status')
    .then((s) => {
      sync.status = s;
    })
    .catch(() => {
      sync.status = null;
    })
    .finally(() => {
      refreshing = null;
      paint();
    });
  return refreshing;
}

/** One sync run now; the outcome is kept for the settings screen. */
export async function syncNow() {
  if (sync.running) return;
  sync.running = true;
  paint();
  try {
    const out = await call('sync_now');
    sync.lastOutcome = out;
    const got = out.applied.reduce((n, a) => n + a.changes, 0);
    const held = out.skipped.filter((f) => f.kind !== 'duplicate').length;
    toast(`Synced: ${plural(out.written.length, 'file', 'files')} sent, ${plural(got, 'change', 'changes')} received${held ? `, ${held} not applied (see Settings)` : ''}${out.open_conflicts ? `, ${plural(out.open_conflicts, 'conflict', 'conflicts')} to review` : ''}`);
  } catch (e) {
    toast(problemText(e), null, true);
  } finally {
    sync.running = false;
    await refreshSyncState();
    if (/^#\/(settings|conflicts|route)?$/.test(location.hash || '#/route')) await render();
  }
}

export function watchSync(everyMs = 5000) {
  document.getElementById('sync-now').addEventListener('click', syncNow);
  bus.addEventListener('save-ended', () => refreshSyncState());
  addEventListener('online', paint);
  addEventListener('offline', paint);
  refreshSyncState();
  setInterval(refreshSyncState, everyMs);
}
