// Practice (livefield practice opens the page with ?practice=1): a Stop
// button ends the block for the trainee; once the rest of the block has run
// in the background, the score replaces it.
import {clock, num} from './format.js';
import {get, post} from './net.js';
import {naturalCompare} from './order.js';

const $ = (id) => document.getElementById(id);

export const practising = new URLSearchParams(location.search).has('practice');

function renderPractice(rep) {
  $('practice').hidden = false;
  const stop = $('p-stop');
  if (rep.state === 'running') return;
  stop.disabled = true;
  if (rep.state === 'finishing') {
    $('p-state').textContent = 'Stopped. The rest of the block is running in the background to score your decision…';
    return;
  }
  stop.hidden = true;
  $('p-state').textContent = rep.stopped ? 'Your decision, scored against the whole block:' : 'You let the block run to its end.';
  $('p-score').hidden = false;
  const o = rep.overall || {};
  $('p-stop-s').textContent = rep.stopped ? clock(rep.stop_s) : '—';
  $('p-block-s').textContent = clock(rep.block_s);
  $('p-saved').textContent = rep.saved_s === null ? '—' : clock(rep.saved_s) + ' (' + num(100 * rep.saved_fraction, 0) + ' %)';
  $('p-mean').textContent = num(o.mean_ridge_correlation, 2);
  $('p-min').textContent = num(o.min_ridge_correlation, 2);
  $('p-rule').textContent = rep.rule_stop_s === null ? 'never' : clock(rep.rule_stop_s);
  $('p-summary').textContent = rep.summary || '';
  const body = $('p-units').tBodies[0];
  body.textContent = '';
  for (const u of (rep.units || []).slice().sort((a, b) => naturalCompare(a.id, b.id))) {
    const tr = document.createElement('tr');
    for (const v of [u.id, num(u.ridge_correlation, 2), num(u.sta_correlation, 2), u.status_at_stop, u.status_full, u.spikes_at_stop]) {
      const td = document.createElement('td');
      td.textContent = v === null || v === undefined ? '—' : String(v);
      tr.appendChild(td);
    }
    body.appendChild(tr);
  }
}

async function pollPractice() {
  const rep = await get('api/practice/report');
  if (rep) {
    renderPractice(rep);
    if (rep.state === 'done') return;
  }
  setTimeout(pollPractice, 1000);
}

// startPractice shows the Stop button and polls the score.
export function startPractice() {
  $('p-stop').addEventListener('click', async () => {
    $('p-stop').disabled = true;
    if (!(await post('api/practice/stop'))) $('p-stop').disabled = false;
  });
  pollPractice();
}
