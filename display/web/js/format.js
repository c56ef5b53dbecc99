// Numbers and times as the page writes them.

// num writes v with digits decimals, or a dash when it is undefined.
export function num(v, digits) {
  return (v === null || v === undefined || !isFinite(v)) ? '—' : Number(v).toFixed(digits);
}

// clock writes seconds as m:ss or h:mm:ss.
export function clock(seconds) {
  if (seconds === null || seconds === undefined || !isFinite(seconds)) return '—';
  const s = Math.floor(seconds);
  const h = Math.floor(s / 3600), m = Math.floor((s % 3600) / 60), r = s % 60;
  const mm = h > 0 ? String(m).padStart(2, '0') : String(m);
  return (h > 0 ? h + ':' : '') + mm + ':' + String(r).padStart(2, '0');
}

// eta writes a projected time to a target.
export function eta(seconds) {
  if (seconds === null || seconds === undefined || !isFinite(seconds)) return '—';
  if (seconds <= 0) return 'reached';
  if (seconds < 60) return '≈ ' + Math.ceil(seconds) + ' s';
  if (seconds < 3600) return '≈ ' + Math.round(seconds / 60) + ' min';
  return '≈ ' + (seconds / 3600).toFixed(1) + ' h';
}
