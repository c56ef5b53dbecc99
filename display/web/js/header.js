// The header: block, clock, rate, how many units are reliable, the block's
// projected time to its criterion and the READY banner; the criterion inputs.
import {clock, eta, num} from './format.js';

const $ = (id) => document.getElementById(id);

// criterion tracks the inputs so an update never overwrites an edit.
export const criterion = {dirty: false, shown: {target: '0.9', fraction: '0.8'}};

export function renderHeader(s) {
  const b = s.summary || {};
  $('block').textContent = s.block || '—';
  $('clock').textContent = clock(s.t);
  let rate = 0, any = false;
  for (const u of s.units || []) if (u.rate_hz !== null && isFinite(u.rate_hz)) { rate += u.rate_hz; any = true; }
  $('rate').textContent = any ? rate.toFixed(rate < 100 ? 1 : 0) : '—';
  $('reliable').textContent = (b.reliable || 0) + ' of ' + (b.units || 0) + (b.drifting ? ' · ' + b.drifting + ' drifting' : '');
  $('reliable').title = (b.significant || 0) + ' units with a significant field; the block needs ' +
    Math.round(100 * (b.fraction || 0)) + '% of them at reliability ' + num(b.target, 2) +
    (b.drifting ? '; ' + b.drifting + ' significant units whose field moved within the block (the electrode may be drifting)' : '');
  $('eta').textContent = b.ready ? 'reached' : eta(b.eta_s);
  $('ready').hidden = !b.ready;
  // Show the criterion in force, unless the experimenter is editing it: an
  // input whose value differs from what we last wrote there is being edited.
  const t = $('target'), f = $('fraction');
  const edited = t.value !== criterion.shown.target || f.value !== criterion.shown.fraction;
  if (!criterion.dirty && !edited && document.activeElement !== t && document.activeElement !== f) {
    if (b.target !== null && b.target !== undefined) t.value = criterion.shown.target = Number(b.target).toFixed(2);
    if (b.fraction !== null && b.fraction !== undefined) f.value = criterion.shown.fraction = Number(b.fraction).toFixed(2);
  }
}
