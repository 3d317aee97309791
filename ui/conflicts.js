// Conflicts left by sync, each with its two versions side by side: the one
// made on this tablet and the other tablet's (or, when neither was made here,
// the one in force and the other). One tap keeps a side; the choice reaches
// the other tablets with their next sync.

import { call } from './api.js';
import { h, clear } from './dom.js';
import { app, register, save, setWhere } from './shell.js';
import { refreshSyncState, when } from './sync.js';

const WHY = {
  concurrent: 'Two tablets changed this without seeing each other’s change.',
  deleted: 'One tablet deleted this record while another changed it.',
  duplicate: 'Two tablets each recorded this; one copy is hidden until you choose.',
  orphan: 'This record points at a record that was deleted on another tablet.',
  other: 'Sync could not decide between these versions.',
};

function what(side) {
  if (side.action === 'deleted') return 'Deleted the record';
  if (side.action === 'restored') return 'Brought the record back';
  if (side.action === 'created') return `Recorded it (copy ${side.row_id.slice(-6)})`;
  return side.value === null ? '(empty)' : String(side.value);
}

function sideCard(conflict, which, choice, heading, rerun) {
  const side = conflict[which];
  const inForce = which === 'current';
  return h(
    'div',
    { class: `version ${inForce ? 'in-force' : ''}`, dataset: { side: which, local: side.is_local } },
    h('h3', {}, heading),
    h('p', { class: `value action-${side.action}` }, what(side)),
    h('small', {}, `${side.device_name} · ${when(side.at)}${inForce ? ' · in force now' : ''}`),
    h(
      'button',
      {
        class: `choose ${choice.replace('_', '-')}`,
        onclick: async () => {
          try {
            await save('resolve_conflict', { key: conflict.key, choice }, { label: 'conflict settled' });
            await refreshSyncState();
            await rerun();
          } catch {
            /* the toast says why */
          }
        },
      },
      inForce ? 'Keep this' : 'Use this',
    ),
  );
}

function conflictCard(c, rerun) {
  const title = c.field ? `${c.record} · ${c.field.replaceAll('_', ' ')}` : c.record;
  let sides;
  if (c.mine) {
    const theirs = c.mine === 'current' ? 'other' : 'current';
    sides = [
      sideCard(c, c.mine, 'keep_mine', 'This tablet', rerun),
      sideCard(c, theirs, 'take_theirs', `${c[theirs].device_name}`, rerun),
    ];
  } else {
    sides = [sideCard(c, 'current', 'keep_current', 'In force', rerun), sideCard(c, 'other', 'take_other', 'The other version', rerun)];
  }
  return h(
    'li',
    { class: `card conflict kind-${c.kind}`, dataset: { key: c.key, table: c.table, field: c.field ?? '' } },
    h('h2', {}, title),
    h('p', {}, WHY[c.kind] ?? WHY.other),
    h('div', { class: 'versions' }, sides),
  );
}

export async function showConflicts(main) {
  setWhere(app.overview?.site, 'Conflicts');
  const rerun = () => showConflicts(main);
  const conflicts = await call('conflicts');
  clear(
    main,
    h('button', { class: 'back', onclick: () => (location.hash = '#/route') }, '← Route'),
    h('h1', {}, 'Conflicts from sync'),
    h('p', { id: 'conflict-count', class: 'progress' }, conflicts.length ? `${conflicts.length} to review` : 'Nothing to review: every tablet agrees.'),
    h('ol', { class: 'conflicts' }, conflicts.map((c) => conflictCard(c, rerun))),
  );
}

register('conflicts', showConflicts);
