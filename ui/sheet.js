// The cage sheet: everything recorded at one cage on the field day. Every
// entry is saved on its own as soon as it is made.

import { call } from './api.js';
import { h, clear, fmt } from './dom.js';
import { app, register, save, setWhere, toast } from './shell.js';

let sheet = null;
let root = null;

async function reload() {
  sheet = await call('sheet', { enclosure_id: sheet.enclosure_id, date: app.date || undefined });
  paint();
}

/** Save, then redraw from the stored state (what is shown is what is on disk). */
async function saveAndReload(op, args, meta) {
  try {
    await save(op, args, meta);
  } catch {
    return;
  }
  await reload();
}

function numberInput(value, onCommit, attrs = {}) {
  return h('input', {
    type: 'number',
    inputmode: 'numeric',
    min: 0,
    step: 1,
    value: value ?? '',
    ...attrs,
    onchange: (e) => onCommit(e.target.value === '' ? null : Number(e.target.value)),
  });
}

function header() {
  const t = sheet.treatment;
  const stocked = sheet.animals
    .filter((a) => a.planned !== null || a.stocked > 0)
    .map((a) => `${a.taxon.code} ${a.stocked + a.restocked - a.removed} put in`);
  const predators = { none: 'no predator', lethal: 'predator can kill', risk: 'predator cannot kill (risk only)' };
  return h(
    'section',
    { class: 'sheet-head' },
    h('button', { class: 'back', onclick: () => (location.hash = '#/route') }, '← Route'),
    h('h1', {}, h('span', { class: 'cage-label' }, sheet.label), ` Block ${sheet.block}`),
    h('p', { class: 'treatment' }, `${t.code} · ${t.name} — ${t.herbivores ? 'herbivores' : 'no herbivores'}, ${predators[t.predator_mode]}`),
    h(
      'p',
      { class: 'facts' },
      `Day ${sheet.day} · ${sheet.date}`,
      sheet.days_since_stocking !== null ? ` · ${sheet.days_since_stocking} days since stocking` : ' · not stocked yet',
      stocked.length ? ` · ${stocked.join(', ')}` : '',
    ),
    sheet.due.length ? h('p', { class: 'due' }, `Due today: ${sheet.due.map((k) => fmt.kind[k]).join(', ')}`) : null,
    // Planned on an earlier day, still within its grace days: to do today (as on the route).
    sheet.late?.length ? h('p', { class: 'due late' }, `Still to do: ${sheet.late.map((p) => `${fmt.kind[p.kind]} day ${p.day}`).join(', ')}`) : null,
  );
}

function censusSection() {
  const rows = sheet.animals.map((a) => {
    const today = a.today ?? {};
    const values = { alive: today.alive ?? null, dead: today.dead ?? null, missing: today.missing ?? null };
    const commit = (field) => (v) => {
      values[field] = v;
      saveAndReload('save_census', { enclosure_id: sheet.enclosure_id, taxon_id: a.taxon.id, ...values }, { label: `${a.taxon.code} ${field} ${v ?? '(empty)'}`, table: 'census' });
    };
    const plannedText = a.planned === null ? 'not stocked in this treatment' : `${a.planned} per cage${a.restock_below !== null ? `, restock below ${a.restock_below}` : ''}`;
    const hints = [];
    if (a.planned === null && (today.alive ?? 0) > 0) hints.push(h('p', { class: 'hint warn' }, 'Found where none should be: note how it got in.'));
    if (a.restock_suggested) {
      hints.push(
        h(
          'p',
          { class: 'hint' },
          `Below the restock threshold: add ${a.restock_suggested}? `,
          h('button', {
            class: 'small',
            onclick: () => saveAndReload('save_stocking', { enclosure_id: sheet.enclosure_id, taxon_id: a.taxon.id, kind: 'restock', count: a.restock_suggested }, { label: `restocked ${a.restock_suggested} ${a.taxon.code}`, table: 'stocking_event' }),
          }, `Restock ${a.restock_suggested}`),
        ),
      );
    }
    return h(
      'div',
      { class: 'census-row', dataset: { taxon: a.taxon.code } },
      h('div', { class: 'who' }, h('strong', {}, a.taxon.code), ` ${a.taxon.common_name ?? a.taxon.scientific_name}`, h('small', {}, plannedText, a.last_alive !== null ? ` · last census ${a.last_alive} alive` : '')),
      h('label', {}, 'Alive', numberInput(values.alive, commit('alive'), { name: 'alive', 'aria-label': `${a.taxon.code} alive` })),
      h('label', {}, 'Dead', numberInput(values.dead, commit('dead'), { name: 'dead', 'aria-label': `${a.taxon.code} dead` })),
      h('label', {}, 'Missing', numberInput(values.missing, commit('missing'), { name: 'missing', 'aria-label': `${a.taxon.code} missing` })),
      hints,
    );
  });
  const stockButtons = sheet.animals
    .filter((a) => a.planned !== null && a.stocked === 0)
    .map((a) => h('button', { onclick: () => saveAndReload('save_stocking', { enclosure_id: sheet.enclosure_id, taxon_id: a.taxon.id, kind: 'initial', count: a.planned }, { label: `stocked ${a.planned} ${a.taxon.code}`, table: 'stocking_event' }) }, `Stock ${a.planned} ${a.taxon.code}`));
  return h('section', { class: 'card', id: 'census' }, h('h2', {}, 'Animals: census and stocking'), stockButtons.length ? h('div', { class: 'row' }, stockButtons) : null, rows);
}

function coverTargets() {
  return [
    ...sheet.plants.map((p) => ({ key: p.id, taxon_id: p.id, code: p.code, name: p.common_name ?? p.scientific_name })),
    ...sheet.cover.ground.map((g) => ({ key: g.code, category: g.code, code: g.code, name: g.name })),
    ...(sheet.cover.layered ? [{ key: 'vegetation', category: 'vegetation', code: 'vegetation', name: 'Overall vegetation' }] : []),
  ];
}

function recordFor(t) {
  return sheet.cover_records.find((r) => (t.taxon_id ? r.taxon_id === t.taxon_id : r.category === t.category));
}

function coverSection() {
  const c = sheet.cover;
  const targets = coverTargets();
  const saveCover = (t, value, label) =>
    saveAndReload('save_cover', { enclosure_id: sheet.enclosure_id, taxon_id: t.taxon_id, category: t.category, ...value }, { label: `${t.code} cover ${label}`, table: 'cover_record' });
  const rows = targets.map((t) => {
    const rec = recordFor(t);
    let control;
    if (c.method === 'percent') {
      control = h('input', {
        type: 'number', inputmode: 'decimal', min: 0, max: 100, step: 'any', value: rec?.value_pct ?? '', 'aria-label': `${t.code} percent`,
        onchange: (e) => saveCover(t, e.target.value === '' ? {} : { percent: Number(e.target.value) }, e.target.value === '' ? 'not assessed' : `${e.target.value} %`),
      });
    } else if (c.method === 'class') {
      control = h('div', { class: 'classes' }, c.classes.map((k) =>
        h('button', { class: rec?.class_code === k.code ? 'class chosen' : 'class', 'aria-pressed': rec?.class_code === k.code, onclick: () => saveCover(t, { class_code: k.code }, `class ${k.code}`) },
          h('strong', {}, k.code), h('small', {}, fmt.range(k)))));
    } else {
      const hits = rec?.pin_hits ?? 0;
      control = h('div', { class: 'counter' },
        h('button', { 'aria-label': `${t.code} one hit less`, disabled: hits <= 0, onclick: () => saveCover(t, { pin_hits: hits - 1 }, `${hits - 1} hits`) }, '−'),
        h('output', { 'aria-label': `${t.code} hits` }, rec ? String(hits) : '–'),
        h('button', { 'aria-label': `${t.code} one hit more`, onclick: () => saveCover(t, { pin_hits: hits + 1 }, `${hits + 1} hits`) }, '+'));
    }
    return h('div', { class: 'cover-row', dataset: { target: t.code } },
      h('div', { class: 'who' }, h('strong', {}, t.code), ` ${t.name}`, h('small', {}, rec?.cover_pct !== undefined && rec?.cover_pct !== null ? fmt.pct(rec.cover_pct) : rec ? 'not assessed' : '')),
      control);
  });
  return h('section', { class: 'card', id: 'cover' }, h('h2', {}, `Cover (${c.method === 'percent' ? 'percent' : c.method === 'class' ? 'cover classes' : `pin frame, ${c.pins_per_frame} pins`})`), coverHint(), rows);
}

/** The running total while entering, so an impossible sum shows at once. */
function coverHint() {
  const c = sheet.cover;
  const recs = sheet.cover_records.filter((r) => r.category !== 'vegetation');
  if (c.method === 'pins') {
    const hits = recs.reduce((s, r) => s + (r.pin_hits ?? 0), 0);
    const ok = c.hit_rule !== 'first' || hits === c.pins_per_frame;
    return h('p', { class: ok ? 'total' : 'total warn', id: 'cover-total' }, `Hits so far: ${hits} of ${c.pins_per_frame} pins${c.hit_rule === 'first' ? ' (first hits must add up to the frame)' : ''}`);
  }
  const total = recs.reduce((s, r) => s + (r.cover_pct ?? 0), 0);
  const lo = 100 - c.tolerance_pct;
  const hi = 100 + c.tolerance_pct;
  const ok = c.layered || (total >= lo && total <= hi);
  const text = c.layered ? `Species total ${fmt.pct(total)} (layers may overlap)` : `Species + ground: ${fmt.pct(total)} (should be 100 ± ${c.tolerance_pct})`;
  return h('p', { class: ok ? 'total' : 'total warn', id: 'cover-total' }, text);
}

function damageSection() {
  const d = sheet.damage;
  const live = sheet.leaves.filter((l) => !l.leaf.fate);
  const rows = sheet.leaves.map(({ leaf, previous, today, taxon_code }) => {
    const saveDamage = (value, label) => saveAndReload('save_damage', { leaf_id: leaf.id, ...value }, { label: `${leaf.tag_label} damage ${label}`, table: 'damage_record' });
    let control;
    if (leaf.fate) control = h('p', { class: 'fate' }, `Leaf ${leaf.fate} on ${leaf.fate_on}`);
    else if (d.method === 'class') {
      control = h('div', { class: 'classes' }, d.classes.map((k) =>
        h('button', { class: today?.class_code === k.code ? 'class chosen' : 'class', 'aria-pressed': today?.class_code === k.code, onclick: () => saveDamage({ class_code: k.code }, `class ${k.code}`) },
          h('strong', {}, k.code), h('small', {}, fmt.range(k)))));
    } else {
      control = h('input', { type: 'number', inputmode: 'decimal', min: 0, max: 100, step: 'any', value: today?.value_pct ?? '', 'aria-label': `${leaf.tag_label} percent`, onchange: (e) => saveDamage({ percent: Number(e.target.value) }, `${e.target.value} %`) });
    }
    const fateButtons = leaf.fate ? null : h('div', { class: 'row' },
      h('button', { class: 'small', onclick: () => saveAndReload('set_leaf_fate', { leaf_id: leaf.id, fate: 'lost' }, { label: `${leaf.tag_label} lost`, table: 'tagged_leaf' }) }, 'Leaf lost'),
      h('button', { class: 'small', onclick: () => {
        const label = prompt(`Label of the new tag replacing ${leaf.tag_label}:`, `${leaf.tag_label}b`);
        if (label) saveAndReload('set_leaf_fate', { leaf_id: leaf.id, fate: 'replaced', replacement_label: label }, { label: `${leaf.tag_label} replaced by ${label}`, table: 'tagged_leaf' });
      } }, 'Replaced'));
    const before = previous ? `before: ${previous.class_code ?? ''} ${fmt.pct(previous.damage_pct)}` : 'first score';
    const lower = previous && today && today.damage_pct < previous.damage_pct ? h('p', { class: 'hint warn' }, 'Lower than before: damage on a tagged leaf only grows. Check the leaf and the tag.') : null;
    return h('div', { class: 'leaf-row', dataset: { tag: leaf.tag_label } },
      h('div', { class: 'who' }, h('strong', {}, leaf.tag_label), ` ${taxon_code}`, h('small', {}, before)), control, lower, fateButtons);
  });
  const tagForm = live.length < d.leaves_per_enclosure ? tagLeafForm(live.length) : null;
  return h('section', { class: 'card', id: 'damage' }, h('h2', {}, `Leaf damage (${d.method === 'class' ? 'damage classes' : 'percent leaf area removed'})`), h('p', { class: 'hint' }, 'Compare with the class ranges on each button: small damage is easy to overestimate.'), rows, tagForm);
}

function tagLeafForm(n) {
  const select = h('select', { 'aria-label': 'Plant of the new leaf' }, sheet.plants.map((p) => h('option', { value: p.id }, `${p.code} ${p.common_name ?? ''}`)));
  const label = h('input', { value: `${sheet.label}-T${n + 1}`, 'aria-label': 'Tag label' });
  return h('div', { class: 'row tag-form' }, select, label, h('button', { onclick: () => saveAndReload('tag_leaf', { enclosure_id: sheet.enclosure_id, taxon_id: select.value, tag_label: label.value }, { label: `tagged ${label.value}`, table: 'tagged_leaf' }) }, 'Tag leaf'));
}

function visitsSection() {
  if (!sheet.visits.length) return h('section', { class: 'card', id: 'visits' }, h('h2', {}, 'Visits today'), h('p', {}, 'Nothing recorded here today yet.'));
  return h('section', { class: 'card', id: 'visits' }, h('h2', {}, 'Visits today'), sheet.visits.map((v) =>
    h('div', { class: 'visit-row', dataset: { kind: v.kind } },
      h('strong', {}, fmt.kind[v.kind]), v.day !== null ? ` (day ${v.day})` : ' (unscheduled)',
      h('label', {}, 'Observer', h('input', { value: v.observer ?? '', onchange: (e) => saveAndReload('update_visit', { visit_id: v.id, observer: e.target.value }, { label: 'observer', table: 'visit' }) })),
      h('label', {}, 'Notes', h('textarea', { rows: 2, onchange: (e) => saveAndReload('update_visit', { visit_id: v.id, notes: e.target.value }, { label: 'notes', table: 'visit' }) }, v.notes ?? '')),
      v.completed ? h('span', { class: 'done' }, 'Done ✓') : h('button', { onclick: () => saveAndReload('update_visit', { visit_id: v.id, completed: true }, { label: `${fmt.kind[v.kind]} done`, table: 'visit' }) }, `Finish ${fmt.kind[v.kind].toLowerCase()}`))));
}

function paint() {
  setWhere(app.overview?.site, `Day ${sheet.day}`, `Cage ${sheet.label}`);
  clear(root, header(), censusSection(), coverSection(), damageSection(), visitsSection());
}

export async function showSheet(main, enclosureId) {
  root = main;
  sheet = await call('sheet', { enclosure_id: enclosureId, date: app.date || undefined });
  paint();
  if (!app.observer) toast('Set the observer on the route screen so visits carry your name.');
}

register('cage', showSheet, 1);
