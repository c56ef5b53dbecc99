// livefield page: receives the per-second update over the websocket and
// draws it. Plain JavaScript modules, no libraries, no build step.
//
//   words.js    status words, field names, sort keys, densities
//   view.js     what is looked at, and the URL that carries it
//   store.js    the latest data from the server
//   net.js      token, requests, websocket
//   header.js   header and criterion; rig.js the rig strip
//   tiles.js    the Units tab; population.js the Population tab
//   detail.js   the unit detail; plots.js its plots
//   colour.js   the map colour scale; order.js sorting and filtering
//   practice.js the practice Stop button and score
import {criterion, renderHeader} from './header.js';
import {Live, onError, post, withToken} from './net.js';
import {pollHealth} from './rig.js';
import {practising, startPractice} from './practice.js';
import {renderPopulation} from './population.js';
import {buildUnitBar, density, renderOverview} from './tiles.js';
import {showDetail, step} from './detail.js';
import {live} from './store.js';
import {readURL, view, writeURL} from './view.js';

const $ = (id) => document.getElementById(id);

function notice(text, bad) {
  const n = $('notice');
  n.textContent = text;
  n.className = 'notice' + (bad ? ' bad' : '');
}
onError((text) => notice(text, true));

const socket = new Live({
  up() { $('link').textContent = 'live'; $('link').className = 'link up'; },
  down() { $('link').textContent = 'connection lost — retrying'; $('link').className = 'link down'; },
  message: received,
});

function received(m) {
  if (m.type === 'snapshot' && m.snapshot) {
    const s = m.snapshot;
    if (live.snap && s.block !== live.snap.block) live.details = {};
    live.snap = s;
    renderHeader(s);
    render();
  } else if (m.type === 'unit' && m.unit) {
    live.details[m.unit.id] = m.unit;
    if (view.unit === m.unit.id) showDetail();
  }
}

// render draws the view from the latest data and tells the server what the
// page needs: the open unit's estimate and the tiles at their density.
function render() {
  const s = live.snap;
  $('overview').hidden = view.tab !== 'units';
  $('population').hidden = view.tab !== 'population';
  $('tab-overview').classList.toggle('on', view.tab === 'units');
  $('tab-population').classList.toggle('on', view.tab === 'population');
  if (s) {
    renderOverview(s, openUnit);
    if (view.tab === 'population') renderPopulation(s, live.details);
  }
  showDetail();
  updateExportLinks();
  // Before the first update the number of units is unknown: ask for
  // compact tiles (the smallest) unless a density was chosen.
  const want = s ? density((s.units || []).length) : view.density === 'auto' ? 'compact' : view.density;
  socket.ask(view.unit !== null ? [view.unit] : [], want);
}

// changed follows every change of the view by the experimenter.
function changed() {
  writeURL();
  render();
}

function openUnit(id) {
  view.unit = id;
  changed();
  $('detail').focus();
}

function closeUnit() {
  view.unit = null;
  changed();
}

function updateExportLinks() {
  const path = view.unit !== null ? 'export/units/' + encodeURIComponent(view.unit) + '.png'
    : view.tab === 'population' ? 'export/population.png' : 'export/overview.png';
  $('export-png').href = withToken(path);
  $('export-json').href = withToken('export/estimates.json');
  if (view.unit !== null) $('d-npy').href = withToken('export/units/' + encodeURIComponent(view.unit) + '.npy');
}

// keys: in the detail, ← → (or ↑ ↓, j k) go to the previous or next shown
// unit, Home and End to the first and last, Esc closes.
function onKey(e) {
  if (view.unit === null) return;
  const tag = (e.target && e.target.tagName) || '';
  if (tag === 'INPUT' || tag === 'SELECT' || tag === 'TEXTAREA') return;
  let moved = false;
  switch (e.key) {
    case 'Escape': closeUnit(); e.preventDefault(); return;
    case 'ArrowRight': case 'ArrowDown': case 'j': moved = step(1); break;
    case 'ArrowLeft': case 'ArrowUp': case 'k': moved = step(-1); break;
    case 'Home': view.unit = live.order[0] ?? view.unit; moved = live.order.length > 0; break;
    case 'End': view.unit = live.order[live.order.length - 1] ?? view.unit; moved = live.order.length > 0; break;
    default: return;
  }
  if (moved) { e.preventDefault(); changed(); }
}

function wire() {
  buildUnitBar(changed);
  $('tab-overview').addEventListener('click', () => { view.tab = 'units'; changed(); });
  $('tab-population').addEventListener('click', () => { view.tab = 'population'; changed(); });
  $('d-close').addEventListener('click', closeUnit);
  $('d-prev').addEventListener('click', () => { if (step(-1)) changed(); });
  $('d-next').addEventListener('click', () => { if (step(1)) changed(); });
  document.addEventListener('keydown', onKey);
  for (const b of document.querySelectorAll('.kind')) {
    b.addEventListener('click', () => {
      view.kind = b.dataset.kind;
      writeURL();
      showDetail();
    });
  }
  $('reset').addEventListener('click', async () => {
    if (!confirm('Forget every estimate of this block and start again?\nUse this after the electrode moved.')) return;
    if (await post('api/reset')) {
      live.details = {};
      showDetail();
      notice('Estimates reset at ' + new Date().toLocaleTimeString() + '.');
    }
  });
  $('d-stc').addEventListener('click', async () => {
    const id = view.unit;
    const d = live.details[id];
    const on = !(d && d.flagged);
    if (await post('api/units/' + encodeURIComponent(id) + '/stc', {on})) {
      notice(on ? 'STC requested for unit ' + id + '.' : 'STC stopped for unit ' + id + '.');
    }
  });
  for (const id of ['target', 'fraction']) $(id).addEventListener('input', () => { criterion.dirty = true; });
  $('apply').addEventListener('click', async () => {
    const target = parseFloat($('target').value), fraction = parseFloat($('fraction').value);
    if (await post('api/criterion', {target, fraction})) {
      criterion.dirty = false;
      criterion.shown = {target: $('target').value, fraction: $('fraction').value};
      notice('Target set: reliability ' + target + ' for ' + Math.round(fraction * 100) + '% of the units.');
    }
  });
}

readURL();
wire();
render();
socket.connect();
pollHealth();
if (practising) startPractice();
