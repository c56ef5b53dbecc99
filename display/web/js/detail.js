// The unit detail: the header facts and controls of one unit and its
// plots (plots.js), and moving between units with the keyboard.
import {FIELD, statusOf} from './words.js';
import {num, eta} from './format.js';
import {hoverMap, hideHover} from './hover.js';
import {drawFilters, drawLagStrip, drawPeakMap, drawReliability, drawSpectrum, drawTimeCourse, lagSlice, peakPixel} from './plots.js';
import {live} from './store.js';
import {view} from './view.js';

const $ = (id) => document.getElementById(id);

// estimate is the estimate chosen by the Ridge / STA / z / Prior buttons
// (the prior is null until the unit's first smooth-local fit).
export function estimate(d) {
  switch (view.kind) {
    case 'sta': return d.sta;
    case 'z': return d.z;
    case 'prior': return d[FIELD.prior];
    default: return d.ridge;
  }
}

// ESTIMATE_WORDS name the estimates a status can come from
// (online.UnitSummary.estimate).
const ESTIMATE_WORDS = {ridge: 'the ridge', prior: 'the smooth-local prior'};

// estimateWords gives the smooth-local prior's reliability and says which
// estimate the unit's status (and its ETA) comes from.
function estimateWords(d) {
  const from = ESTIMATE_WORDS[d[FIELD.estimate]];
  const prior = d[FIELD.prior] ? 'prior reliability ' + num(d[FIELD.priorReliability], 2) : 'no smooth-local fit yet';
  return prior + (from ? ' · status from ' + from : '');
}

// drawn remembers what the detail body last drew, so an update that
// changes nothing of the open unit does not redraw it.
let drawn = {d: null, kind: null};

// showDetail opens (or refreshes) the detail of view.unit.
export function showDetail() {
  const id = view.unit;
  $('detail').hidden = id === null;
  if (id === null) { hideHover(); return; }
  $('d-id').textContent = 'unit ' + id;
  const pos = live.order.indexOf(id);
  $('d-pos').textContent = (pos >= 0 ? (pos + 1) + ' of ' + live.order.length : 'not shown') + ' · ← →';
  $('d-pos').title = 'position among the shown units, in the chosen order; ← and → (or k and j) move, Esc closes';
  const d = live.details[id];
  const known = live.snap && (live.snap.units || []).some((u) => u.id === id);
  $('d-wait').hidden = !!d;
  $('d-wait').textContent = known || !live.snap ? 'Loading the full estimate…' : 'No unit ' + id + ' in this block.';
  $('d-body').hidden = !d;
  for (const o of document.querySelectorAll('.kind')) o.classList.toggle('on', o.dataset.kind === view.kind);
  if (d && (d !== drawn.d || view.kind !== drawn.kind)) {
    renderDetail(d);
    drawn = {d, kind: view.kind};
  }
}

// step moves the detail by delta units in the shown order (wrapping);
// when the open unit is not among them, it goes to the first or last.
export function step(delta) {
  const order = live.order;
  if (!order.length) return false;
  const i = order.indexOf(view.unit);
  const next = i < 0 ? (delta > 0 ? 0 : order.length - 1) : (i + delta + order.length) % order.length;
  view.unit = order[next];
  return true;
}

// The lag strip's cells, made once per number of lags.
const strip = [];

function lagCells(lags, n) {
  const box = $('d-lags');
  while (strip.length > lags) strip.pop().el.remove();
  while (strip.length < lags) {
    const l = strip.length;
    const el = document.createElement('div');
    el.className = 'lag';
    el.innerHTML = '<canvas></canvas><div></div>';
    const canvas = el.querySelector('canvas');
    hoverMap(canvas, () => {
      const dd = live.details[view.unit];
      if (!dd) return null;
      return {map: lagSlice(estimate(dd), l, dd.shape[1] * dd.shape[2], dd.shape[0]), width: dd.shape[2], height: dd.shape[1], note: 'lag ' + l};
    });
    box.appendChild(el);
    strip.push({el, canvas, label: el.lastChild});
  }
  return strip;
}

// stcWords says what happens to the unit's STC (online.UnitDetail.stc_state):
// running, waiting and why, or queued for results.
function stcWords(d) {
  if (d.stc_state && /^waiting/.test(d.stc_state)) return 'STC: ' + d.stc_state + ' — it starts when a place frees';
  if (d.stc_state) return 'STC: ' + d.stc_state;
  return d.flagged ? 'STC requested' : '';
}

// calibrationWords says when "no field" can be said of a unit still
// collecting, at which spike count a significant unit's field was found,
// and whether its field moved within the block (drift), with both centres.
function calibrationWords(d) {
  let w = '';
  if (d.status === 'collecting' && typeof d.no_field_spikes === 'number') {
    w += ' · "no field" only from ' + Math.round(d.no_field_spikes) + ' spikes, when a weak field would have shown';
  }
  if (d.significant_at_spikes > 0) w += ' · significant at ' + d.significant_at_spikes + ' spikes';
  if (d.drift && d.drift_from && d.drift_to) {
    w += ' · DRIFT: centre (' + num(d.drift_from[0], 1) + ', ' + num(d.drift_from[1], 1) + ') early, (' +
      num(d.drift_to[0], 1) + ', ' + num(d.drift_to[1], 1) + ') late — the electrode may have moved';
  }
  return w;
}

function renderFacts(d) {
  const f = d.features || {};
  const st = statusOf(d.status);
  $('d-status').textContent = st.word;
  $('d-status').className = 'badge ' + st.css;
  $('d-facts').textContent = 'ridge reliability ' + num(d.reliability, 2) + ' · ' + estimateWords(d) + ' · ETA ' + eta(d.eta_s) + ' · ' + d.spikes + ' spikes · ' +
    num(d.rate_hz, 1) + ' sp/s · −log10 p ' + num(d.significance, 1) + ' · latency ' + num(d.latency_ms, 0) +
    ' ms · separability ' + num(f.separability, 2) + ' · ' + (f.polarity > 0 ? 'bright' : f.polarity < 0 ? 'dark' : '—') + ' peak' +
    ' · predictive r ' + num(d.predictive_r, 2) + calibrationWords(d);
  $('d-stc').textContent = d.flagged ? 'Stop STC' : 'Ask for STC';
  const words = stcWords(d);
  $('d-stcstate').textContent = words;
  $('d-stcstate').className = 'stcstate' + (/^STC: waiting/.test(words) ? ' warn' : '');
}

// renderDetail draws everything of one unit.
export function renderDetail(d) {
  const [lags, height, width] = d.shape;
  const n = width * height;
  const f = d.features || {};
  const est = estimate(d) || [];
  renderFacts(d);
  drawLagStrip(lagCells(lags, n), est, d.shape, f.peak_lag, d.frame_period_s || 0);

  const peak = lagSlice(est, f.peak_lag, n, lags);
  drawPeakMap($('d-map'), peak, width, height, f);
  $('d-mapcap').textContent = (view.kind === 'prior' && !d[FIELD.prior] ? 'no smooth-local fit yet — ' : '') +
    (view.kind === 'prior' ? 'Prior' : view.kind.toUpperCase()) + ' at the peak lag ' + f.peak_lag + ' — ring: fitted centre, 1σ extent';
  $('d-map').title = 'centre x ' + num(f.centre_x, 2) + ', y ' + num(f.centre_y, 2) + ' px; σ ' + num(f.sigma_x, 2) + ' × ' + num(f.sigma_y, 2) + ' px';

  const pixel = peakPixel(f.map);
  // The separable fit is of the ridge weights (the features' estimate): it
  // is drawn on the ridge's scale only; the STA, z and prior views have
  // other units.
  const sepShown = view.kind === 'ridge';
  drawTimeCourse($('d-time'), est, d.shape, pixel, sepShown ? f : {});
  $('d-sepkey').hidden = !sepShown;
  $('d-time').title = 'pixel x ' + (pixel % width) + ', y ' + Math.floor(pixel / width);

  const target = live.snap && live.snap.summary ? live.snap.summary.target : null;
  drawReliability($('d-hist'), d.history || [], target, d.eta_s);
  $('d-hist').title = 'reliability ' + num(d.reliability, 3) + ', target ' + num(target, 2) + ', ETA ' + eta(d.eta_s);

  const stc = d.stc;
  $('d-stcbox').hidden = !stc;
  if (stc) {
    drawSpectrum($('d-spec'), stc);
    $('d-spec').title = (stc.eigenvalues || []).length + ' eigenvalues; chance range ' + num(stc.null_low, 3) + ' to ' +
      num(stc.null_high, 3) + '; ' + (stc.spikes || 0) + ' spikes';
    drawFilters($('d-filters'), stc, width, height);
  }
}
