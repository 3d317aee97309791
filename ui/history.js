// The history of one record: every change made to it, oldest first, with the
// value before and after, who (the device's name) and when (local time);
// reached from "History" beside each row of the sheet and after a save.

import { call } from './api.js';
import { h, clear } from './dom.js';
import { app, register, setWhere } from './shell.js';

/** A UTC time as this tablet's local time, to the second (YYYY-MM-DD hh:mm:ss). */
function localTime(utc) {
  const t = new Date(utc);
  if (Number.isNaN(t.getTime())) return utc;
  const p = (n) => String(n).padStart(2, '0');
  return `${t.getFullYear()}-${p(t.getMonth() + 1)}-${p(t.getDate())} ${p(t.getHours())}:${p(t.getMinutes())}:${p(t.getSeconds())}`;
}

export async function showHistory(main, table, id) {
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
          h('span', { class: 'when' }, localTime(c.at)),
          ' ',
          h('span', { class: 'who' }, c.device),
          ': ',
          h('strong', {}, c.op === 'delete' ? 'deleted' : c.op === 'insert' && !c.field ? 'created' : (c.field ?? c.op)),
          c.op === 'delete' ? '' : ` ${c.old === null ? '(empty)' : c.old} → ${c.new === null ? '(empty)' : c.new}`,
        ),
      ),
    ),
  );
}

register('history', showHistory, 2);
