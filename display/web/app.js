// livefield page: receives the per-second snapshot over the websocket and
// draws it. Plain JavaScript, no libraries.
'use strict';

// The map colour scale from -limit to +limit; the same five stops as the
// server-side pictures (display/png.go, divergingStops).
const DIVERGING = [[36, 84, 168], [120, 170, 220], [246, 244, 238], [232, 150, 72], [160, 56, 10]];
const UNDEFINED = [170, 170, 170];
const STATUS_CLASS = {'collecting': 's-collecting', 'emerging': 's-emerging', 'reliable': 's-reliable', 'no field': 's-nofield'};

const token = new URLSearchParams(location.search).get('token') || '';
const state = {
  snap: null,       // latest online.Snapshot
  details: {},      // unit id -> latest UnitDetail
  open: null,       // id of the unit in the detail view
  kind: 'ridge',    // estimate shown in the detail view
  tab: 'overview',
  ws: null,
  criterionDirty: false,
  shown: {target: '0.9', fraction: '0.8'}, // criterion values last written into the inputs
};

const $ = (id) => document.getElementById(id);

// ---- numbers -------------------------------------------------------------

function num(v, digits) {
  return (v === null || v === undefined || !isFinite(v)) ? '—' : Number(v).toFixed(digits);
}

function clock(seconds) {
  if (seconds === null || !isFinite(seconds)) return '—';
  const s = Math.floor(seconds);
  const h = Math.floor(s / 3600), m = Math.floor((s % 3600) / 60), r = s % 60;
  const mm = h > 0 ? String(m).padStart(2, '0') : String(m);
  return (h > 0 ? h + ':' : '') + mm + ':' + String(r).padStart(2, '0');
}

function eta(seconds) {
  if (seconds === null || seconds === undefined || !isFinite(seconds)) return '—';
  if (seconds <= 0) return 'reached';
  if (seconds < 60) return '≈ ' + Math.ceil(seconds) + ' s';
  if (seconds < 3600) return '≈ ' + Math.round(seconds / 60) + ' min';
  return '≈ ' + (seconds / 3600).toFixed(1) + ' h';
}

// naturalCompare orders ids with digit runs as numbers: "2" before "10".
function naturalCompare(a, b) {
  const re = /(\d+)|(\D+)/g;
  const pa = a.match(re) || [], pb = b.match(re) || [];
  for (let i = 0; i < Math.min(pa.length, pb.length); i++) {
    const x = pa[i], y = pb[i];
    const dx = /^\d/.test(x), dy = /^\d/.test(y);
    if (dx && dy) {
      const nx = x.replace(/^0+/, ''), ny = y.replace(/^0+/, '');
      if (nx.length !== ny.length) return nx.length - ny.length;
      if (nx !== ny) return nx < ny ? -1 : 1;
    } else if (x !== y) {
      return x < y ? -1 : 1;
    }
  }
  return pa.length - pb.length;
}

function maxAbs(values) {
  let m = 0;
  for (const v of values || []) if (v !== null && isFinite(v) && Math.abs(v) > m) m = Math.abs(v);
  return m;
}

// ---- colour and maps -------------------------------------------------------

function diverging(v, limit) {
  if (v === null || !isFinite(v)) return UNDEFINED;
  let t = limit > 0 ? v / limit : 0;
  t = Math.max(-1, Math.min(1, t));
  const x = (t + 1) * 2;
  const i = Math.min(3, Math.floor(x));
  const f = x - i, a = DIVERGING[i], b = DIVERGING[i + 1];
  return [0, 1, 2].map((k) => Math.round(a[k] * (1 - f) + b[k] * f));
}

// paintMap draws a height×width map onto canvas, one canvas pixel per
// stimulus pixel (CSS scales it up without smoothing).
function paintMap(canvas, map, width, height, limit) {
  if (canvas.width !== width) canvas.width = width;
  if (canvas.height !== height) canvas.height = height;
  const ctx = canvas.getContext('2d');
  const img = ctx.createImageData(width, height);
  const ok = map && map.length === width * height;
  for (let p = 0; p < width * height; p++) {
    const c = ok ? diverging(map[p], limit) : UNDEFINED;
    img.data[4 * p] = c[0]; img.data[4 * p + 1] = c[1]; img.data[4 * p + 2] = c[2]; img.data[4 * p + 3] = 255;
  }
  ctx.putImageData(img, 0, 0);
}

// hoverMap shows the value under the pointer for a map canvas.
function hoverMap(canvas, getter) {
  const box = $('readout');
  canvas.addEventListener('mousemove', (e) => {
    const r = canvas.getBoundingClientRect();
    const g = getter();
    if (!g) return;
    const col = Math.floor((e.clientX - r.left) / r.width * g.width);
    const row = Math.floor((e.clientY - r.top) / r.height * g.height);
    if (col < 0 || row < 0 || col >= g.width || row >= g.height) return;
    const v = g.map ? g.map[row * g.width + col] : null;
    box.textContent = 'x ' + col + '  y ' + row + '  ' + num(v, 3) + (g.note ? '  ' + g.note : '');
    box.style.left = (e.clientX + 14) + 'px';
    box.style.top = (e.clientY + 14) + 'px';
    box.style.display = 'block';
  });
  canvas.addEventListener('mouseleave', () => { box.style.display = 'none'; });
}

// ---- header ----------------------------------------------------------------

function renderHeader(s) {
  const b = s.summary || {};
  $('block').textContent = s.block || '—';
  $('clock').textContent = clock(s.t);
  let rate = 0, any = false;
  for (const u of s.units || []) if (u.rate_hz !== null && isFinite(u.rate_hz)) { rate += u.rate_hz; any = true; }
  $('rate').textContent = any ? rate.toFixed(rate < 100 ? 1 : 0) : '—';
  $('reliable').textContent = (b.reliable || 0) + ' of ' + (b.units || 0);
  $('reliable').title = (b.significant || 0) + ' units with a significant field; the block needs ' +
    Math.round(100 * (b.fraction || 0)) + '% of them at reliability ' + num(b.target, 2);
  $('eta').textContent = b.ready ? 'reached' : eta(b.eta_s);
  $('ready').hidden = !b.ready;
  // Show the criterion in force, unless the experimenter is editing it: an
  // input whose value differs from what we last wrote there is being edited.
  const t = $('target'), f = $('fraction');
  const edited = t.value !== state.shown.target || f.value !== state.shown.fraction;
  if (!state.criterionDirty && !edited && document.activeElement !== t && document.activeElement !== f) {
    if (b.target !== null && b.target !== undefined) t.value = state.shown.target = Number(b.target).toFixed(2);
    if (b.fraction !== null && b.fraction !== undefined) f.value = state.shown.fraction = Number(b.fraction).toFixed(2);
  }
}

// ---- overview --------------------------------------------------------------

const tiles = new Map(); // id -> {el, canvas, ...}

function tileFor(id) {
  let t = tiles.get(id);
  if (t) return t;
  const el = document.createElement('div');
  el.className = 'tile';
  el.dataset.id = id;
  el.innerHTML = '<canvas></canvas><div class="tline"><span class="tid"></span><span class="rel"></span></div>' +
    '<div class="tline"><span class="badge"></span><span class="sub"></span></div>';
  t = {el, canvas: el.querySelector('canvas'), id: el.querySelector('.tid'), rel: el.querySelector('.rel'),
    badge: el.querySelector('.badge'), sub: el.querySelector('.sub'), unit: null};
  t.id.textContent = id;
  el.addEventListener('click', () => openDetail(id));
  const tt = t;
  hoverMap(t.canvas, () => tt.unit && state.snap ? {map: tt.unit.map, width: state.snap.shape[2], height: state.snap.shape[1]} : null);
  tiles.set(id, t);
  return t;
}

function renderOverview(s) {
  const units = (s.units || []).slice().sort((a, b) => naturalCompare(a.id, b.id));
  const box = $('tiles');
  const seen = new Set();
  const height = s.shape[1], width = s.shape[2];
  units.forEach((u, i) => {
    const t = tileFor(u.id);
    seen.add(u.id);
    t.unit = u;
    if (box.children[i] !== t.el) box.insertBefore(t.el, box.children[i] || null);
    t.el.className = 'tile ' + (STATUS_CLASS[u.status] || 's-collecting');
    t.badge.className = 'badge ' + (STATUS_CLASS[u.status] || 's-collecting');
    t.badge.textContent = u.status || 'collecting';
    t.rel.textContent = 'r ' + num(u.reliability, 2);
    t.rel.title = 'split-half reliability (Spearman–Brown corrected)';
    t.sub.textContent = (u.spikes || 0) + ' sp' + (u.flagged ? ' · STC' : '');
    t.el.title = 'unit ' + u.id + ': ' + u.status + ', reliability ' + num(u.reliability, 3) +
      ', ' + (u.spikes || 0) + ' spikes, ' + num(u.rate_hz, 1) + ' spikes/s, peak lag ' + u.peak_lag +
      ' (' + num(u.latency_ms, 0) + ' ms), ETA ' + eta(u.eta_s);
    paintMap(t.canvas, u.map, width, height, maxAbs(u.map));
  });
  for (const [id, t] of tiles) {
    if (!seen.has(id)) { t.el.remove(); tiles.delete(id); }
  }
  $('empty').hidden = units.length > 0;
  if (units.length === 0) $('empty').textContent = 'No units yet — waiting for spikes.';
}

// ---- population ------------------------------------------------------------

function renderPopulation(s) {
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
  ctx.font = 'bold 20px system-ui, sans-serif';
  for (const u of (s.units || []).slice().sort((a, b) => naturalCompare(a.id, b.id))) {
    if (u.status !== 'reliable' || u.centre_x === null || u.centre_y === null) continue;
    n++;
    const [x, y] = at(u.centre_x, u.centre_y);
    const d = state.details[u.id];
    const angle = d && d.features && d.features.angle !== null ? d.features.angle : 0;
    ctx.strokeStyle = '#ffd640'; ctx.lineWidth = 3;
    ctx.beginPath();
    ctx.ellipse(x, y, Math.max(1, (u.sigma_x || 0) * sc), Math.max(1, (u.sigma_y || 0) * sc), angle, 0, 2 * Math.PI);
    ctx.stroke();
    ctx.fillStyle = '#ffd640'; ctx.fillRect(x - 3, y - 3, 6, 6);
    ctx.fillStyle = '#ececec'; ctx.fillText(u.id, x + 6, y - 6);
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
    '<div class="sub">ellipses: 1σ extent of each reliable unit</div>';
}

// ---- detail ----------------------------------------------------------------

function openDetail(id) {
  state.open = id;
  $('detail').hidden = false;
  $('d-id').textContent = 'unit ' + id;
  $('d-npy').href = withToken('export/units/' + encodeURIComponent(id) + '.npy');
  const d = state.details[id];
  $('d-wait').hidden = !!d;
  $('d-body').hidden = !d;
  if (d) renderDetail(d);
  sendView();
  updateExportLink();
}

function closeDetail() {
  state.open = null;
  $('detail').hidden = true;
  $('readout').style.display = 'none';
  sendView();
  updateExportLink();
}

function estimate(d) {
  return state.kind === 'sta' ? d.sta : state.kind === 'z' ? d.z : d.ridge;
}

function plot(canvas, draw) {
  const ctx = canvas.getContext('2d');
  ctx.fillStyle = '#0e0f12'; ctx.fillRect(0, 0, canvas.width, canvas.height);
  const area = {x: 52, y: 14, w: canvas.width - 66, h: canvas.height - 46};
  ctx.strokeStyle = '#3a3f4a'; ctx.lineWidth = 1; ctx.strokeRect(area.x, area.y, area.w, area.h);
  ctx.font = '14px system-ui, sans-serif'; ctx.fillStyle = '#9aa0aa';
  draw(ctx, area);
}

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

function renderDetail(d) {
  const [lags, height, width] = d.shape;
  const n = width * height;
  const f = d.features || {};
  const est = estimate(d) || [];
  $('d-status').textContent = d.status;
  $('d-status').className = 'badge ' + (STATUS_CLASS[d.status] || 's-collecting');
  $('d-facts').textContent = 'reliability ' + num(d.reliability, 2) + ' · ' + d.spikes + ' spikes · ' +
    num(d.rate_hz, 1) + ' sp/s · −log10 p ' + num(d.significance, 1) + ' · latency ' + num(d.latency_ms, 0) +
    ' ms · separability ' + num(f.separability, 2) + ' · ' + (f.polarity > 0 ? 'bright' : f.polarity < 0 ? 'dark' : '—') + ' peak';
  $('d-stc').textContent = d.flagged ? 'Stop STC' : 'Ask for STC';

  // Every lag, one scale for the whole strip.
  const limit = maxAbs(est);
  const strip = $('d-lags');
  while (strip.children.length > lags) strip.lastChild.remove();
  while (strip.children.length < lags) {
    const l = strip.children.length;
    const div = document.createElement('div');
    div.className = 'lag';
    div.innerHTML = '<canvas></canvas><div></div>';
    const c = div.querySelector('canvas');
    hoverMap(c, () => {
      const dd = state.details[state.open];
      if (!dd) return null;
      const e = estimate(dd) || [];
      return {map: e.slice(l * n, (l + 1) * n), width: dd.shape[2], height: dd.shape[1], note: 'lag ' + l};
    });
    strip.appendChild(div);
  }
  const period = d.frame_period_s || 0;
  for (let l = 0; l < lags; l++) {
    const div = strip.children[l];
    div.className = 'lag' + (l === f.peak_lag ? ' peak' : '');
    div.lastChild.textContent = 'lag ' + l + (period > 0 ? ' · ' + Math.round(l * period * 1000) + ' ms' : '');
    paintMap(div.firstChild, est.length === lags * n ? est.slice(l * n, (l + 1) * n) : null, width, height, limit);
  }

  // Peak-lag map, large, with the fitted centre and 1σ extent.
  const peak = est.length === lags * n ? est.slice(f.peak_lag * n, (f.peak_lag + 1) * n) : null;
  const big = $('d-map'), ctx = big.getContext('2d');
  const off = document.createElement('canvas');
  paintMap(off, peak, width, height, maxAbs(peak));
  ctx.imageSmoothingEnabled = false;
  ctx.drawImage(off, 0, 0, big.width, big.height);
  const sx = big.width / width, sy = big.height / height;
  if (f.centre_x !== null && f.centre_y !== null && f.sigma_x > 0 && f.sigma_y > 0) {
    ctx.strokeStyle = '#111'; ctx.lineWidth = 5;
    ctx.beginPath(); ctx.ellipse((f.centre_x + 0.5) * sx, (f.centre_y + 0.5) * sy, f.sigma_x * sx, f.sigma_y * sy, f.angle || 0, 0, 2 * Math.PI); ctx.stroke();
    ctx.strokeStyle = '#ffd640'; ctx.lineWidth = 2.5; ctx.stroke();
  }
  $('d-mapcap').textContent = state.kind.toUpperCase() + ' at the peak lag ' + f.peak_lag + ' — ring: fitted centre, 1σ extent';
  big.title = 'centre x ' + num(f.centre_x, 2) + ', y ' + num(f.centre_y, 2) + ' px; σ ' + num(f.sigma_x, 2) + ' × ' + num(f.sigma_y, 2) + ' px';

  // Time course at the peak pixel, with the separable approximation.
  let pp = -1, pm = 0;
  (f.map || []).forEach((v, i) => { if (v !== null && Math.abs(v) > pm) { pm = Math.abs(v); pp = i; } });
  plot($('d-time'), (ctx, a) => {
    if (pp < 0 || est.length !== lags * n) return;
    const course = [], sep = [];
    for (let l = 0; l < lags; l++) {
      course.push(est[l * n + pp]);
      sep.push(f.temporal && f.spatial ? f.temporal[l] * f.spatial[pp] : null);
    }
    const top = Math.max(maxAbs(course), maxAbs(sep)) || 1;
    const X = (l) => a.x + (lags > 1 ? l / (lags - 1) : 0.5) * a.w;
    const Y = (v) => a.y + a.h / 2 - (v / top) * a.h / 2;
    line(ctx, [[a.x, Y(0)], [a.x + a.w, Y(0)]], '#3a3f4a', 1);
    line(ctx, sep.map((v, l) => [X(l), v === null ? NaN : Y(v)]), '#78e6ff', 3, [8, 5]);
    line(ctx, course.map((v, l) => [X(l), v === null ? NaN : Y(v)]), '#ececec', 3);
    ctx.fillStyle = '#9aa0aa';
    ctx.fillText('lag →', a.x + a.w - 40, a.y + a.h + 30);
    for (let l = 0; l < lags; l++) ctx.fillText(String(l), X(l) - 4, a.y + a.h + 16);
    ctx.fillText(num(top, 2), 4, a.y + 10);
    ctx.fillText(num(-top, 2), 4, a.y + a.h);
  });
  $('d-time').title = 'pixel x ' + (pp % width) + ', y ' + Math.floor(pp / width);

  // Reliability over time, target line and projected crossing.
  const hist = d.history || [];
  const target = state.snap && state.snap.summary ? state.snap.summary.target : null;
  plot($('d-hist'), (ctx, a) => {
    const tNow = hist.length ? hist[hist.length - 1].t : 0;
    const tCross = d.eta_s !== null && d.eta_s > 0 ? tNow + d.eta_s : null;
    const tMax = Math.max(1, tNow, tCross || 0) * 1.05;
    const X = (t) => a.x + (t / tMax) * a.w;
    const Y = (r) => a.y + a.h - Math.max(0, Math.min(1, r)) * a.h;
    if (target !== null) line(ctx, [[a.x, Y(target)], [a.x + a.w, Y(target)]], '#de9e00', 2, [10, 6]);
    line(ctx, hist.map((p) => [X(p.t), p.reliability === null ? NaN : Y(p.reliability)]), '#ececec', 3);
    const last = hist.length ? hist[hist.length - 1] : null;
    if (tCross !== null && target !== null && last && last.reliability !== null) {
      line(ctx, [[X(last.t), Y(last.reliability)], [X(tCross), Y(target)]], '#9aa0aa', 2, [4, 5]);
      ctx.fillStyle = '#de9e00'; ctx.beginPath(); ctx.arc(X(tCross), Y(target), 6, 0, 2 * Math.PI); ctx.fill();
    }
    ctx.fillStyle = '#9aa0aa';
    ctx.fillText('1', 30, Y(1) + 5); ctx.fillText('0', 30, Y(0));
    ctx.fillText('0:00', a.x, a.y + a.h + 18);
    ctx.fillText(clock(tMax), a.x + a.w - 36, a.y + a.h + 18);
  });
  $('d-hist').title = 'reliability ' + num(d.reliability, 3) + ', target ' + num(target, 2) + ', ETA ' + eta(d.eta_s);

  // Spike-triggered covariance, when computed.
  const stc = d.stc;
  $('d-stcbox').hidden = !stc;
  if (stc) {
    const ev = stc.eigenvalues || [];
    plot($('d-spec'), (ctx, a) => {
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
        ctx.fillStyle = out ? '#ffd640' : '#ececec';
        ctx.beginPath(); ctx.arc(X(i), Y(v), out ? 5 : 2.5, 0, 2 * Math.PI); ctx.fill();
      });
      ctx.fillStyle = '#9aa0aa';
      ctx.fillText(num(hi, 2), 4, a.y + 10); ctx.fillText(num(lo, 2), 4, a.y + a.h);
      ctx.fillText('rank →', a.x + a.w - 50, a.y + a.h + 30);
    });
    $('d-spec').title = ev.length + ' eigenvalues; chance range ' + num(stc.null_low, 3) + ' to ' + num(stc.null_high, 3) + '; ' + (stc.spikes || 0) + ' spikes';
    const box = $('d-filters');
    box.innerHTML = '';
    const filters = stc.filters || [];
    if (!filters.length) box.textContent = 'No eigenvalue outside the chance range yet.';
    filters.slice(0, 4).forEach((flt, k) => {
      const row = document.createElement('div');
      row.className = 'frow';
      const ev2 = (stc.significant_eigenvalues || [])[k];
      row.innerHTML = '<span>filter ' + (k + 1) + ' (λ ' + num(ev2, 2) + ')</span>';
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
}

// ---- controls ---------------------------------------------------------------

function withToken(path) {
  return token ? path + (path.includes('?') ? '&' : '?') + 'token=' + encodeURIComponent(token) : path;
}

function notice(text, bad) {
  const n = $('notice');
  n.textContent = text;
  n.className = 'notice' + (bad ? ' bad' : '');
}

async function post(path, body) {
  const headers = {'Content-Type': 'application/json'};
  if (token) headers['X-Livefield-Token'] = token;
  try {
    const r = await fetch(path, {method: 'POST', headers, body: JSON.stringify(body || {})});
    const v = await r.json().catch(() => ({}));
    if (!r.ok) { notice(v.error || ('request failed: ' + r.status), true); return null; }
    return v;
  } catch (e) {
    notice('request failed: ' + e.message, true);
    return null;
  }
}

function updateExportLink() {
  const a = $('export-png');
  const path = state.open !== null ? 'export/units/' + encodeURIComponent(state.open) + '.png'
    : state.tab === 'population' ? 'export/population.png' : 'export/overview.png';
  a.href = withToken(path);
  $('export-json').href = withToken('export/estimates.json');
}

function setTab(tab) {
  state.tab = tab;
  $('overview').hidden = tab !== 'overview';
  $('population').hidden = tab !== 'population';
  $('tab-overview').classList.toggle('on', tab === 'overview');
  $('tab-population').classList.toggle('on', tab === 'population');
  if (state.snap && tab === 'population') renderPopulation(state.snap);
  updateExportLink();
}

function wire() {
  $('tab-overview').addEventListener('click', () => setTab('overview'));
  $('tab-population').addEventListener('click', () => setTab('population'));
  $('d-close').addEventListener('click', closeDetail);
  document.addEventListener('keydown', (e) => { if (e.key === 'Escape' && state.open !== null) closeDetail(); });
  for (const b of document.querySelectorAll('.kind')) {
    b.addEventListener('click', () => {
      state.kind = b.dataset.kind;
      for (const o of document.querySelectorAll('.kind')) o.classList.toggle('on', o === b);
      const d = state.details[state.open];
      if (d) renderDetail(d);
    });
  }
  $('reset').addEventListener('click', async () => {
    if (!confirm('Forget every estimate of this block and start again?\nUse this after the electrode moved.')) return;
    const v = await post('api/reset');
    if (v) {
      state.details = {};
      if (state.open !== null) { $('d-wait').hidden = false; $('d-body').hidden = true; }
      notice('Estimates reset at ' + new Date().toLocaleTimeString() + '.');
    }
  });
  $('d-stc').addEventListener('click', async () => {
    const id = state.open;
    const d = state.details[id];
    const on = !(d && d.flagged);
    const v = await post('api/units/' + encodeURIComponent(id) + '/stc', {on});
    if (v) notice(on ? 'STC requested for unit ' + id + '.' : 'STC stopped for unit ' + id + '.');
  });
  for (const id of ['target', 'fraction']) $(id).addEventListener('input', () => { state.criterionDirty = true; });
  $('apply').addEventListener('click', async () => {
    const target = parseFloat($('target').value), fraction = parseFloat($('fraction').value);
    const v = await post('api/criterion', {target, fraction});
    if (v) { state.criterionDirty = false; state.shown = {target: $('target').value, fraction: $('fraction').value}; notice('Target set: reliability ' + target + ' for ' + Math.round(fraction * 100) + '% of the units.'); }
  });
  updateExportLink();
}

// ---- websocket --------------------------------------------------------------

function sendView() {
  if (state.ws && state.ws.readyState === WebSocket.OPEN) {
    state.ws.send(JSON.stringify({view: state.open !== null ? [state.open] : []}));
  }
}

function connect() {
  const u = new URL('ws', location.href);
  u.protocol = location.protocol === 'https:' ? 'wss:' : 'ws:';
  if (token) u.searchParams.set('token', token);
  const ws = new WebSocket(u);
  state.ws = ws;
  ws.onopen = () => {
    $('link').textContent = 'live';
    $('link').className = 'link up';
    sendView();
  };
  ws.onmessage = (e) => {
    let m;
    try { m = JSON.parse(e.data); } catch (err) { return; }
    if (m.type === 'snapshot') {
      const s = m.snapshot;
      if (state.snap && s.block !== state.snap.block) state.details = {};
      state.snap = s;
      renderHeader(s);
      renderOverview(s);
      if (state.tab === 'population') renderPopulation(s);
    } else if (m.type === 'unit' && m.unit) {
      state.details[m.unit.id] = m.unit;
      if (state.open === m.unit.id) {
        $('d-wait').hidden = true;
        $('d-body').hidden = false;
        renderDetail(m.unit);
      }
    }
  };
  ws.onclose = () => {
    $('link').textContent = 'connection lost — retrying';
    $('link').className = 'link down';
    state.ws = null;
    setTimeout(connect, 1000);
  };
}

// ---- rig health ------------------------------------------------------------

// renderRig shows the mapper's link to the rig: the NATS connection, whether
// ingest is durable, late spikes and refused messages, a rejected block.
function renderRig(h) {
  const el = $('rig');
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
  if (typeof h.lag_s === 'number' && h.lag_s > 5) add('estimates ' + Math.round(h.lag_s) + ' s behind', 'warn');
}

async function pollHealth() {
  try {
    const r = await fetch('api/health');
    if (r.ok) renderRig(await r.json());
  } catch (err) {
    // the websocket badge already says the mapper is unreachable
  }
  setTimeout(pollHealth, 2000);
}

// ---- practice --------------------------------------------------------------

// In practice (livefield practice opens the page with ?practice=1) a Stop
// button ends the block for the trainee; once the rest of the block has run
// in the background, the score replaces it.
const practice = new URLSearchParams(location.search).has('practice');

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
  try {
    const r = await fetch('api/practice/report');
    if (r.ok) {
      const rep = await r.json();
      renderPractice(rep);
      if (rep.state === 'done') return;
    }
  } catch (err) {
    // try again below
  }
  setTimeout(pollPractice, 1000);
}

$('p-stop').addEventListener('click', async () => {
  $('p-stop').disabled = true;
  const headers = token ? {'X-Livefield-Token': token} : {};
  try {
    await fetch('api/practice/stop', {method: 'POST', headers});
  } catch (err) {
    $('p-stop').disabled = false;
  }
});

wire();
connect();
pollHealth();
if (practice) pollPractice();
