// The map colour scale and the drawing of maps on canvases.

// DIVERGING is the map colour scale from -limit to +limit: the same five
// stops as the server's pictures (display/png.go, divergingStops; a test
// checks they agree).
export const DIVERGING = [[36, 84, 168], [120, 170, 220], [246, 244, 238], [232, 150, 72], [160, 56, 10]];
export const UNDEFINED = [170, 170, 170];

// diverging maps v in [-limit, limit] to a colour; beyond is clipped,
// undefined is grey, a limit <= 0 maps everything to the middle.
export function diverging(v, limit) {
  if (v === null || v === undefined || !isFinite(v)) return UNDEFINED;
  let t = limit > 0 && isFinite(limit) ? v / limit : 0;
  t = Math.max(-1, Math.min(1, t));
  const x = (t + 1) * 2;
  const i = Math.min(3, Math.floor(x));
  const f = x - i, a = DIVERGING[i], b = DIVERGING[i + 1];
  return [0, 1, 2].map((k) => Math.round(a[k] * (1 - f) + b[k] * f));
}

// maxAbs is the largest finite |v| (0 when none).
export function maxAbs(values) {
  let m = 0;
  for (const v of values || []) if (v !== null && isFinite(v) && Math.abs(v) > m) m = Math.abs(v);
  return m;
}

// paintMap draws a height×width map onto canvas, one canvas pixel per map
// pixel (CSS scales it up without smoothing).
export function paintMap(canvas, map, width, height, limit) {
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

// tileMap turns a tile's quantised map (display/tiles.go: integers in
// [-100, 100] of map_max) back into values, with its rows and columns.
export function tileMap(u) {
  if (!u.map || !u.map_shape) return null;
  const scale = (u.map_max || 0) / 100;
  return {values: u.map.map((q) => (q === null ? null : q * scale)), height: u.map_shape[0], width: u.map_shape[1]};
}
