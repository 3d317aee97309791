// Settings of this device: its name (shown to the other tablets) and the sync
// folder it exchanges changes through; with the sync state in full and what
// the last "Sync now" did.

import { call, Problem } from './api.js';
import { h, clear } from './dom.js';
import { app, register, save, setWhere } from './shell.js';
import { sync, when, refreshSyncState, syncNow } from './sync.js';

const TARGET_STATE = {
  not_set: 'No sync folder set: this tablet keeps everything and syncs nothing.',
  ready: 'In reach: changes are exchanged on their own.',
  unavailable: 'Out of reach: changes wait here until it is back.',
};

function fieldProblem(id) {
  return h('p', { class: 'field-problem', id, role: 'alert', hidden: true });
}

function lastOutcome(out) {
  if (!out) return null;
  return h(
    'section',
    { class: 'card', id: 'sync-outcome' },
    h('h2', {}, `Last “Sync now” (${when(out.finished_at)})`),
    h(
      'ul',
      {},
      h('li', {}, `Sent: ${out.written.length ? out.written.join(', ') : 'nothing new'}`),
      h('li', {}, `Received: ${out.applied.length ? out.applied.map((a) => `${a.changes} from ${a.device_name}`).join(', ') : 'nothing new'}`),
      out.skipped.map((s) => h('li', { class: s.kind === 'rejected' ? 'warn' : '' }, `${s.file}: ${s.kind === 'waiting' ? 'waiting — ' : s.kind === 'duplicate' ? 'copy — ' : 'not applied — '}${s.reason}`)),
      out.warnings.map((w) => h('li', { class: 'warn' }, w)),
      out.clock_anomalies.map((c) => h('li', { class: 'warn' }, c)),
    ),
  );
}

export async function showSettings(main) {
  setWhere(app.overview?.site, 'Settings');
  const [settings] = await Promise.all([call('settings'), refreshSyncState()]);
  const status = sync.status;
  const name = h('input', { id: 'device-name', name: 'device_name', value: settings.device_name, maxlength: 60, autocomplete: 'off' });
  const target = h('input', { id: 'sync-target', name: 'sync_target', value: settings.sync_target ?? '', placeholder: 'e.g. /media/stick/fieldcage-sync', autocomplete: 'off', spellcheck: 'false' });
  const problems = { 'device.name': fieldProblem('device-name-problem'), 'device.sync_target': fieldProblem('sync-target-problem') };
  const submit = async (e) => {
    e.preventDefault();
    for (const p of Object.values(problems)) p.hidden = true;
    try {
      await save('save_settings', { device_name: name.value, sync_target: target.value }, { label: 'settings' });
      app.overview = null;
      await refreshSyncState();
      await showSettings(main);
    } catch (err) {
      const slot = err instanceof Problem && problems[err.field];
      if (slot) {
        slot.textContent = err.message;
        slot.hidden = false;
      }
    }
  };
  clear(
    main,
    h('button', { class: 'back', onclick: () => (location.hash = '#/route') }, '← Route'),
    h('h1', {}, 'Settings'),
    h(
      'form',
      { class: 'card settings', onsubmit: submit },
      h('label', { for: 'device-name' }, 'Name of this tablet', h('small', {}, 'Shown to the other tablets beside the changes made here.')),
      name,
      problems['device.name'],
      h('label', { for: 'sync-target' }, 'Sync folder', h('small', {}, 'The full path of a folder on the USB stick, the station laptop share or a network folder. Every tablet uses the same folder. Leave empty to stop syncing.')),
      target,
      problems['device.sync_target'],
      h('div', { class: 'row' }, h('button', { type: 'submit', id: 'save-settings' }, 'Save settings')),
      h('small', {}, `Device id ${settings.device_id}`),
    ),
    h(
      'section',
      { class: 'card', id: 'sync-detail' },
      h('h2', {}, 'Sync'),
      status
        ? h(
            'ul',
            {},
            h('li', { class: `target-${status.target_state}` }, TARGET_STATE[status.target_state], status.target_problem ? h('small', {}, status.target_problem) : null),
            h('li', {}, status.last_sync ? `Last sync finished ${when(status.last_sync.finished_at)} with ${status.last_sync.target}` : 'Never synced'),
            h('li', { id: 'pending-count' }, `${status.pending_changes} change(s) made here not yet sent`),
            h('li', {}, status.open_conflicts ? h('a', { href: '#/conflicts' }, `${status.open_conflicts} conflict(s) to review`) : 'No conflicts to review'),
            h('li', {}, settings.sync_every_secs ? `Looks at the folder every ${settings.sync_every_secs} s and syncs on its own` : 'Automatic sync is off: use “Sync now”'),
            status.auto_sync.last_problem ? h('li', { class: 'warn' }, `Automatic sync: ${status.auto_sync.last_problem}`) : null,
            status.clock_anomalies.map((a) => h('li', { class: 'warn' }, `Clock: ${a.message}`)),
          )
        : h('p', { class: 'problem' }, 'The sync state cannot be read.'),
      h('button', { id: 'sync-now-here', disabled: !status || status.target_state === 'not_set', onclick: syncNow }, 'Sync now'),
    ),
    lastOutcome(sync.lastOutcome),
  );
}

register('settings', showSettings);
