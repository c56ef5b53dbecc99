// The plots of the unit detail, one function per plot. Each draws one
// unit's data onto its own canvas and knows nothing of the rest of the page.
import {maxAbs, paintMap} from './colour.js';
import {clock, num} from './format.js';

const INK = '#ececec', DIM = '#9aa0aa', LINE = '#3a3f4a', RING = '#ffd640', ACCENT = '#78e6ff', TARGET = '#de9e00';

// frame clears a plot canvas, draws the axes box and hands draw the
// plotting area.
function frame(canvas, draw) {
  const ctx = canvas.getContext('2d');
  ctx.fillStyle = '#0e0f12'; ctx.fillRect(0, 0, canvas.width, canvas.height);
  const area = {x: 52, y: 14, w: canvas.width - 66, h: canvas.height - 46};
  ctx.strokeStyle = LINE; ctx.lineWidth = 1; ctx.strokeRect(area.x, area.y, area.w, area.h);
  ctx.font = '14px system-ui, sans-serif'; ctx.fillStyle = DIM;
  draw(ctx, area);
}

// line draws a polyline, breaking it at undefined points.
function line(ctx, pts, colour, width, dash) {
  ctx.strokeStyle = colour; ctx.lineWidth = width; ctx.setLineDash(dash || []);
  ctx.beginPath();
  let started = false;
  for (const [x, y] of pts) {
    if (!isFinite(x) || !isFinite(y)) { started = false; continue; }
    if (!started) { ctx.moveTo(x, y); started = true; } else ctx.lineTo(x, y);
  }
  ctx.stroke(); ctx.setLineDash([]);
}

// lagSlice is lag l of an estimate of lags×n values, or null.
export function lagSlice(est, l, n, lags) {
  return est && est.length === lags * n && l >= 0 && l < lags ? est.slice(l * n, (l + 1) * n) : null;
}

// drawLagStrip paints every lag on one scale into the strip's canvases
// (made by the caller, one per lag) and frames the peak lag.
export function drawLagStrip(cells, est, shape, peakLag, period) {
  const [lags, height, width] = shape;
  const n = width * height, limit = maxAbs(est);
  cells.forEach((cell, l) => {
    cell.el.className = 'lag' + (l === peakLag ? ' peak' : '');
    cell.label.textContent = 'lag ' + l + (period > 0 ? ' · ' + Math.round(l * period * 1000) + ' ms' : '');
    paintMap(cell.canvas, lagSlice(est, l, n, lags), width, height, limit);
  });
}

// drawPeakMap paints the peak-lag map large with the fitted centre and its
// 1σ ellipse.
export function drawPeakMap(canvas, peak, width, height, f) {
  const ctx = canvas.getContext('2d');
  const off = document.createElement('canvas');
  paintMap(off, peak, width, height, maxAbs(peak));
  ctx.imageSmoothingEnabled = false;
  ctx.drawImage(off, 0, 0, canvas.width, canvas.height);
  const sx = canvas.width / width, sy = canvas.height / height;
  if (f.centre_x !== null && f.centre_y !== null && f.sigma_x > 0 && f.sigma_y > 0) {
    ctx.strokeStyle = '#111'; ctx.lineWidth = 5;
    ctx.beginPath();
    ctx.ellipse((f.centre_x + 0.5) * sx, (f.centre_y + 0.5) * sy, f.sigma_x * sx, f.sigma_y * sy, f.angle || 0, 0, 2 * Math.PI);
    ctx.stroke();
    ctx.strokeStyle = RING; ctx.lineWidth = 2.5; ctx.stroke();
  }
}

// peakPixel is the index of the largest |value| of a map (-1 when none).
export function peakPixel(map) {
  let at = -1, top = 0;
  (map || []).forEach((v, i) => { if (v !== null && Math.abs(v) > top) { top = Math.abs(v); at = i; } });
  return at;
}

// drawTimeCourse plots the estimate at one pixel over the lags against the
// separable approximation temporal[l]·spatial[pixel].
export function drawTimeCourse(canvas, est, shape, pixel, f) {
  const [lags, height, width] = shape;
  const n = width * height;
  frame(canvas, (ctx, a) => {
    if (pixel < 0 || !est || est.length !== lags * n) return;
    const course = [], sep = [];
    for (let l = 0; l < lags; l++) {
      course.push(est[l * n + pixel]);
      sep.push(f.temporal && f.spatial ? f.temporal[l] * f.spatial[pixel] : null);
    }
    const top = Math.max(maxAbs(course), maxAbs(sep)) || 1;
    const X = (l) => a.x + (lags > 1 ? l / (lags - 1) : 0.5) * a.w;
    const Y = (v) => a.y + a.h / 2 - (v / top) * a.h / 2;
    line(ctx, [[a.x, Y(0)], [a.x + a.w, Y(0)]], LINE, 1);
    line(ctx, sep.map((v, l) => [X(l), v === null ? NaN : Y(v)]), ACCENT, 3, [8, 5]);
    line(ctx, course.map((v, l) => [X(l), v === null ? NaN : Y(v)]), INK, 3);
    ctx.fillStyle = DIM;
    ctx.fillText('lag →', a.x + a.w - 40, a.y + a.h + 30);
    for (let l = 0; l < lags; l++) ctx.fillText(String(l), X(l) - 4, a.y + a.h + 16);
    ctx.fillText(num(top, 2), 4, a.y + 10);
    ctx.fillText(num(-top, 2), 4, a.y + a.h);
  });
}

// drawReliability plots reliability over the block with the target line
// and the projected crossing etaS seconds after the last point.
export function drawReliability(canvas, history, target, etaS) {
  frame(canvas, (ctx, a) => {
    const tNow = history.length ? history[history.length - 1].t : 0;
    const tCross = etaS !== null && etaS !== undefined && etaS > 0 ? tNow + etaS : null;
    const tMax = Math.max(1, tNow, tCross || 0) * 1.05;
    const X = (t) => a.x + (t / tMax) * a.w;
    const Y = (r) => a.y + a.h - Math.max(0, Math.min(1, r)) * a.h;
    if (target !== null && target !== undefined) line(ctx, [[a.x, Y(target)], [a.x + a.w, Y(target)]], TARGET, 2, [10, 6]);
    line(ctx, history.map((p) => [X(p.t), p.reliability === null ? NaN : Y(p.reliability)]), INK, 3);
    const last = history.length ? history[history.length - 1] : null;
    if (last && last.reliability !== null) {
      ctx.fillStyle = INK; ctx.beginPath(); ctx.arc(X(last.t), Y(last.reliability), 4, 0, 2 * Math.PI); ctx.fill();
    }
    if (tCross !== null && target !== null && target !== undefined && last && last.reliability !== null) {
      line(ctx, [[X(last.t), Y(last.reliability)], [X(tCross), Y(target)]], DIM, 2, [4, 5]);
      ctx.fillStyle = TARGET; ctx.beginPath(); ctx.arc(X(tCross), Y(target), 6, 0, 2 * Math.PI); ctx.fill();
    }
    ctx.fillStyle = DIM;
    ctx.fillText('1', 30, Y(1) + 5); ctx.fillText('0', 30, Y(0));
    ctx.fillText('0:00', a.x, a.y + a.h + 18);
    ctx.fillText(clock(tMax), a.x + a.w - 36, a.y + a.h + 18);
  });
}

// drawSpectrum plots the STC eigenvalues against the shaded chance range;
// those outside it are large and coloured.
export function drawSpectrum(canvas, stc) {
  const ev = stc.eigenvalues || [];
  frame(canvas, (ctx, a) => {
    let lo = Math.min(...ev.filter(isFinite), stc.null_low || 0), hi = Math.max(...ev.filter(isFinite), stc.null_high || 0);
    if (!isFinite(lo) || !isFinite(hi) || hi <= lo) { lo = 0; hi = 1; }
    const pad = (hi - lo) * 0.08;
    lo -= pad; hi += pad;
    const Y = (v) => a.y + a.h - (v - lo) / (hi - lo) * a.h;
    const X = (i) => a.x + (ev.length > 1 ? i / (ev.length - 1) : 0.5) * a.w;
    if (stc.null_low !== null && stc.null_high !== null) {
      ctx.fillStyle = 'rgba(154,160,170,0.25)';
      ctx.fillRect(a.x, Y(stc.null_high), a.w, Y(stc.null_low) - Y(stc.null_high));
    }
    ev.forEach((v, i) => {
      const out = v > stc.null_high || v < stc.null_low;
      ctx.fillStyle = out ? RING : INK;
      ctx.beginPath(); ctx.arc(X(i), Y(v), out ? 5 : 2.5, 0, 2 * Math.PI); ctx.fill();
    });
    ctx.fillStyle = DIM;
    ctx.fillText(num(hi, 2), 4, a.y + 10); ctx.fillText(num(lo, 2), 4, a.y + a.h);
    ctx.fillText('rank →', a.x + a.w - 50, a.y + a.h + 30);
  });
}

// drawFilters lists the leading significant STC filters, each as one map
// per lag of the reduced space, into box.
export function drawFilters(box, stc, width, height) {
  const n = width * height;
  box.textContent = '';
  const filters = stc.filters || [];
  if (!filters.length) box.textContent = 'No eigenvalue outside the chance range yet.';
  filters.slice(0, 4).forEach((flt, k) => {
    const row = document.createElement('div');
    row.className = 'frow';
    const label = document.createElement('span');
    label.textContent = 'filter ' + (k + 1) + ' (λ ' + num((stc.significant_eigenvalues || [])[k], 2) + ')';
    row.appendChild(label);
    const lim = maxAbs(flt);
    (stc.lags || []).forEach((lag, j) => {
      const c = document.createElement('canvas');
      c.title = 'lag ' + lag;
      paintMap(c, flt.slice(j * n, (j + 1) * n), width, height, lim);
      row.appendChild(c);
    });
    box.appendChild(row);
  });
}
