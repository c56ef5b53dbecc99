// The Population tab: the reliable units' centres and 1σ ellipses on the
// stimulus grid, and the suggested aperture for the next experiment.
import {num} from './format.js';
import {naturalCompare} from './order.js';
import {WORD} from './words.js';

const $ = (id) => document.getElementById(id);

// renderPopulation draws s; details (unit id -> UnitDetail) give the
// ellipses' angles where known.
export function renderPopulation(s, details) {
  const c = $('popcanvas'), ctx = c.getContext('2d');
  const height = s.shape[1], width = s.shape[2];
  if (!width || !height) return;
  const margin = 20;
  const sc = Math.min((c.width - 2 * margin) / width, (c.height - 2 * margin) / height);
  const at = (x, y) => [margin + (x + 0.5) * sc, margin + (y + 0.5) * sc];
  ctx.fillStyle = '#000'; ctx.fillRect(0, 0, c.width, c.height);
  ctx.strokeStyle = '#3e424c'; ctx.lineWidth = 1;
  for (let x = 0; x <= width; x++) { ctx.beginPath(); ctx.moveTo(margin + x * sc, margin); ctx.lineTo(margin + x * sc, margin + height * sc); ctx.stroke(); }
  for (let y = 0; y <= height; y++) { ctx.beginPath(); ctx.moveTo(margin, margin + y * sc); ctx.lineTo(margin + width * sc, margin + y * sc); ctx.stroke(); }
  const b = s.summary || {};
  let n = 0;
  const reliable = (s.units || []).filter((u) => u.status === WORD.reliable && u.centre_x !== null && u.centre_y !== null);
  // With many units the labels would cover the grid: ids only up to 40.
  const labels = reliable.length <= 40;
  ctx.font = 'bold 20px system-ui, sans-serif';
  for (const u of reliable.sort((a, b) => naturalCompare(a.id, b.id))) {
    n++;
    const [x, y] = at(u.centre_x, u.centre_y);
    const d = details[u.id];
    const angle = d && d.features && d.features.angle !== null ? d.features.angle : 0;
    ctx.strokeStyle = '#ffd640'; ctx.lineWidth = labels ? 3 : 1.5;
    ctx.beginPath();
    ctx.ellipse(x, y, Math.max(1, (u.sigma_x || 0) * sc), Math.max(1, (u.sigma_y || 0) * sc), angle, 0, 2 * Math.PI);
    ctx.stroke();
    ctx.fillStyle = '#ffd640'; ctx.fillRect(x - 3, y - 3, 6, 6);
    if (labels) { ctx.fillStyle = '#ececec'; ctx.fillText(u.id, x + 6, y - 6); }
  }
  if (b.aperture !== null && b.aperture > 0 && b.suggest_x !== null && b.suggest_y !== null) {
    const [x, y] = at(b.suggest_x, b.suggest_y);
    const half = b.aperture * sc / 2;
    ctx.strokeStyle = '#78e6ff'; ctx.lineWidth = 3; ctx.setLineDash([12, 8]);
    ctx.strokeRect(x - half, y - half, 2 * half, 2 * half);
    ctx.setLineDash([]);
  }
  $('popinfo').innerHTML =
    '<div>reliable units drawn: <b>' + n + '</b></div>' +
    '<div>population centre: <b>x ' + num(b.centre_x, 1) + ', y ' + num(b.centre_y, 1) + '</b> px</div>' +
    '<div>spread: <b>' + num(b.spread_x, 1) + ' × ' + num(b.spread_y, 1) + '</b> px</div>' +
    '<div>suggested centre: <b>x ' + num(b.suggest_x, 1) + ', y ' + num(b.suggest_y, 1) + '</b> px</div>' +
    '<div>aperture (dashed): <b>' + num(b.aperture, 1) + ' px</b>' +
    (b.aperture_deg > 0 ? ' = <b>' + num(b.aperture_deg, 1) + '°</b>' : '') +
    ', covering ' + num(100 * (b.aperture_fraction || 0), 0) + '% of the fields</div>' +
    '<div class="sub">ellipses: 1σ extent of each reliable unit' + (labels ? '' : ' (ids left out above 40 units)') + '</div>';
}
