// The rig strip: the mapper's link to the rig (from /api/health), what it
// refused, and the update's own time when it nears its budget.
import {get} from './net.js';
import {num} from './format.js';
import {UPDATE_BUDGET_S} from './words.js';

export function renderRig(h) {
  const el = document.getElementById('rig');
  el.textContent = '';
  const add = (text, cls, title) => {
    const span = document.createElement('span');
    span.textContent = text;
    if (cls) span.className = cls;
    if (title) span.title = title;
    el.appendChild(span);
  };
  if (h.connection) {
    add('NATS ' + h.connection.toLowerCase(), h.connection === 'CONNECTED' ? '' : 'bad',
      h.reconnects ? h.reconnects + ' reconnects' : '');
  }
  if (h.durable === true) add('durable (JetStream)', '', h.stream || '');
  if (h.warning) add(h.warning, 'warn');
  if (h.shard) add('shard ' + h.shard);
  const rejected = Object.values(h.rejected || {}).reduce((a, b) => a + b, 0);
  if (h.late_spikes) add(h.late_spikes + ' late spikes', 'warn', 'spikes that arrived after their bin had closed; counted, not mapped');
  if (rejected) {
    add(rejected + ' messages refused', 'warn',
      Object.entries(h.rejected).map(([k, v]) => k + ': ' + v).join('\n'));
  }
  if (h.slow_consumer_drops) add(h.slow_consumer_drops + ' messages dropped (slow consumer)', 'bad');
  if (h.block_error) add('block ' + (h.rejected_block || '') + ' refused: ' + h.block_error, 'bad');
  // How far the estimates trail the data received: a second or so normally
  // (the grace for late spikes and the time between updates); more while the
  // mapper catches up with a backlog. Nothing is lost meanwhile.
  if (typeof h.stream_lag_s === 'number' && h.stream_lag_s > 3) {
    add('estimates ' + num(h.stream_lag_s, h.stream_lag_s < 10 ? 1 : 0) + ' s behind the stream, catching up', 'warn',
      (h.bins_waiting || 0) + ' bins waiting to be folded in; the estimates are exact for the bins they hold');
  }
  // The time between updates: from the health when it says (update_every_s),
  // else the mapper's default.
  const budget = typeof h.update_every_s === 'number' && h.update_every_s > 0 ? h.update_every_s : UPDATE_BUDGET_S;
  renderBudget(add, h.update_s, budget);
}

// renderBudget says how long the last update of the estimates took once
// that is half of the time between updates or more: past the budget the
// estimates fall behind the rig.
function renderBudget(add, seconds, budget) {
  if (typeof seconds !== 'number' || !(seconds >= budget / 2)) return;
  add('update takes ' + num(seconds, 2) + ' s of its ' + num(budget, budget < 10 ? 1 : 0).replace(/\.0$/, '') + ' s',
    seconds >= 0.9 * budget ? 'bad' : 'warn',
    'the time the last update of every unit\'s estimates took; beyond the time between updates the page falls behind the rig');
}

// pollHealth reads /api/health every two seconds.
export async function pollHealth() {
  const h = await get('api/health');
  if (h) renderRig(h); // otherwise the websocket badge already says the mapper is unreachable
  setTimeout(pollHealth, 2000);
}
