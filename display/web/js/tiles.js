// The Units tab: the bar that chooses density, order and filter, and one
// tile per shown unit.
import {DENSITIES, ESTIMATE, FIELD, SORTS, STATUS, autoDensity, statusOf} from './words.js';
import {maxAbs, paintMap, tileMap} from './colour.js';
import {eta, num} from './format.js';
import {statusReliability, visibleUnits} from './order.js';
import {hoverMap} from './hover.js';
import {live} from './store.js';
import {view} from './view.js';

const $ = (id) => document.getElementById(id);

// density is the density in force for n units.
export function density(n) {
  return view.density === 'auto' ? autoDensity(n) : view.density;
}

// buildUnitBar makes the density buttons, the sort choice and the status
// chips; changed is called after every change of the view.
export function buildUnitBar(changed) {
  const dens = $('densities');
  for (const d of DENSITIES) {
    const b = document.createElement('button');
    b.textContent = d.label;
    b.dataset.density = d.key;
    b.className = 'seg';
    b.addEventListener('click', () => { view.density = d.key; changed(); });
    dens.appendChild(b);
  }
  const sort = $('sort');
  for (const s of SORTS) {
    const o = document.createElement('option');
    o.value = s.key;
    o.textContent = s.label;
    sort.appendChild(o);
  }
  sort.addEventListener('change', () => {
    view.sort = sort.value;
    view.desc = SORTS.find((s) => s.key === view.sort).desc;
    changed();
  });
  $('order').addEventListener('click', () => { view.desc = !view.desc; changed(); });
  const chips = $('statuses');
  for (const s of STATUS) {
    const b = document.createElement('button');
    b.className = 'chip ' + s.css;
    b.dataset.status = s.word;
    b.title = s.hint + ' (click to show only these; click again for all)';
    b.innerHTML = '<span class="word"></span> <span class="count"></span>';
    b.querySelector('.word').textContent = s.word;
    b.addEventListener('click', (e) => {
      // A click shows only this state; with Ctrl or Shift it adds or removes it.
      if (e.ctrlKey || e.shiftKey || e.metaKey) {
        if (view.statuses.has(s.word)) view.statuses.delete(s.word); else view.statuses.add(s.word);
      } else if (view.statuses.size === 1 && view.statuses.has(s.word)) {
        view.statuses.clear();
      } else {
        view.statuses = new Set([s.word]);
      }
      changed();
    });
    chips.appendChild(b);
  }
  const q = $('q');
  q.addEventListener('input', () => { view.text = q.value; changed(); });
  $('clear').addEventListener('click', () => { view.statuses.clear(); view.text = ''; changed(); });
}

// showUnitBar sets the bar's controls to the view.
function showUnitBar(n, counts, shown) {
  const d = density(n);
  for (const b of $('densities').children) {
    b.classList.toggle('on', b.dataset.density === view.density);
    if (b.dataset.density === 'auto') b.textContent = 'Auto (' + d + ')';
  }
  $('sort').value = view.sort;
  $('order').textContent = view.desc ? '↓' : '↑';
  $('order').title = view.desc ? 'largest first (click to reverse)' : 'smallest first (click to reverse)';
  for (const b of $('statuses').children) {
    b.classList.toggle('on', view.statuses.has(b.dataset.status));
    b.querySelector('.count').textContent = counts[b.dataset.status] || 0;
  }
  if ($('q').value !== view.text) $('q').value = view.text;
  const filtered = view.statuses.size > 0 || view.text.trim() !== '';
  $('clear').hidden = !filtered;
  $('shown').textContent = filtered ? shown + ' of ' + n + ' units shown' : n + ' units';
}

const tiles = new Map(); // id -> {el, canvas, id, rel, badge, sub, bar, unit}

function tileFor(id, open) {
  let t = tiles.get(id);
  if (t) return t;
  const el = document.createElement('div');
  el.className = 'tile';
  el.dataset.id = id;
  el.innerHTML = '<canvas></canvas><div class="tline"><span class="tid"></span><span class="rel"><span class="rv"></span><span class="from"></span></span></div>' +
    '<div class="tline more"><span class="badge"></span><span class="sub"></span></div><div class="rbar"><i></i><b></b></div>';
  t = {el, canvas: el.querySelector('canvas'), id: el.querySelector('.tid'), rel: el.querySelector('.rel'),
    relValue: el.querySelector('.rel .rv'), relFrom: el.querySelector('.rel .from'),
    badge: el.querySelector('.badge'), sub: el.querySelector('.sub'), bar: el.querySelector('.rbar i'),
    tick: el.querySelector('.rbar b'), unit: null};
  t.id.textContent = id;
  t.id.classList.toggle('long', id.length > 6); // smaller in the compact grid, never cut
  el.addEventListener('click', () => open(id));
  const tt = t;
  hoverMap(t.canvas, () => {
    const m = tt.unit && tileMap(tt.unit);
    return m ? {map: m.values, width: m.width, height: m.height, block: (live.snap && live.snap.map_block) || 1} : null;
  });
  tiles.set(id, t);
  return t;
}

// renderOverview draws the tiles of the shown units in the chosen order
// and records that order for the detail view's keyboard navigation.
export function renderOverview(s, open) {
  const all = s.units || [];
  const shown = visibleUnits(all, view);
  const counts = {};
  for (const u of all) counts[u.status] = (counts[u.status] || 0) + 1;
  showUnitBar(all.length, counts, shown.length);
  live.order = shown.map((u) => u.id);
  const box = $('tiles');
  const d = s.density || 'large';
  box.className = 'tiles d-' + d;
  const target = s.summary && s.summary.target;
  const seen = new Set();
  shown.forEach((u, i) => {
    const t = tileFor(u.id, open);
    seen.add(u.id);
    t.unit = u;
    if (box.children[i] !== t.el) box.insertBefore(t.el, box.children[i] || null);
    const st = statusOf(u.status);
    t.el.className = 'tile ' + st.css + (u.id === view.unit ? ' current' : '');
    t.badge.className = 'badge ' + st.css;
    t.badge.textContent = st.word;
    // The reliability the status comes from, marked with its estimate
    // when the unit is significant (short in the smaller tiles).
    const rel = statusReliability(u);
    const marked = !!u[FIELD.estimate];
    t.relValue.textContent = (d === 'large' ? 'r ' : '') + num(rel.value, 2);
    t.relFrom.textContent = !marked ? '' : d === 'large' ? ' ' + rel.from : ' ' + rel.from.charAt(0);
    t.rel.title = 'split-half reliability (Spearman–Brown corrected) of the ' +
      (rel.from === ESTIMATE.prior ? 'smooth-local prior estimate' : 'ridge estimate') +
      (marked ? ', the estimate the status comes from' : '');
    t.sub.textContent = (u.spikes || 0) + ' sp' + (u.flagged ? ' · STC' : '') + (u.drift ? ' · drift' : '');
    t.sub.classList.toggle('warn', !!u.drift);
    const r = rel.value !== null && isFinite(rel.value) ? Math.max(0, Math.min(1, rel.value)) : 0;
    t.bar.style.width = (100 * r) + '%';
    t.tick.style.left = (100 * (target || 0)) + '%';
    t.el.title = 'unit ' + u.id + ': ' + st.word + ', reliability ' + num(rel.value, 3) + ' (' + rel.from + ')' +
      (rel.from === ESTIMATE.prior ? ', ridge ' + num(u.reliability, 3) : '') +
      ', −log10 p ' + num(u.significance, 1) + ', ' + (u.spikes || 0) + ' spikes, ' + num(u.rate_hz, 1) +
      ' spikes/s, peak lag ' + u.peak_lag + ' (' + num(u.latency_ms, 0) + ' ms), ETA ' + eta(u.eta_s) +
      (u.flagged ? ', STC requested' : '') +
      (typeof u.predictive_r === 'number' ? ', predictive r ' + num(u.predictive_r, 2) : '') +
      (u.status === 'collecting' && typeof u.no_field_spikes === 'number'
        ? '; "no field" can be said from ' + Math.round(u.no_field_spikes) + ' spikes, when a weak field would have shown' : '') +
      (u.drift && u.drift_from && u.drift_to
        ? '; DRIFT: the field moved from (' + num(u.drift_from[0], 1) + ', ' + num(u.drift_from[1], 1) + ') early in the block to (' +
          num(u.drift_to[0], 1) + ', ' + num(u.drift_to[1], 1) + ') late' : '');
    const m = tileMap(u);
    if (m) paintMap(t.canvas, m.values, m.width, m.height, maxAbs(m.values));
  });
  for (const [id, t] of tiles) {
    if (!seen.has(id)) { t.el.remove(); tiles.delete(id); }
  }
  $('empty').hidden = shown.length > 0;
  if (all.length === 0) $('empty').textContent = 'No units yet — waiting for spikes.';
  else if (shown.length === 0) $('empty').textContent = 'No unit matches the filter.';
}
