// The value under the pointer on a map canvas.
import {num} from './format.js';

const box = () => document.getElementById('readout');

// hoverMap shows, while the pointer is over canvas, the map value under it.
// getter returns {map, width, height, note, block} or null; block (default
// 1) is the number of stimulus pixels a side that one map pixel averages.
export function hoverMap(canvas, getter) {
  canvas.addEventListener('mousemove', (e) => {
    const g = getter();
    if (!g) return;
    const r = canvas.getBoundingClientRect();
    const col = Math.floor((e.clientX - r.left) / r.width * g.width);
    const row = Math.floor((e.clientY - r.top) / r.height * g.height);
    if (col < 0 || row < 0 || col >= g.width || row >= g.height) return;
    const v = g.map ? g.map[row * g.width + col] : null;
    const b = box();
    const k = g.block || 1;
    const at = (i) => (k > 1 ? (i * k) + '–' + (i * k + k - 1) : String(i));
    b.textContent = 'x ' + at(col) + '  y ' + at(row) + '  ' + num(v, 3) + (g.note ? '  ' + g.note : '') +
      (k > 1 ? '  (mean of ' + k + '×' + k + ' pixels)' : '');
    b.style.left = (e.clientX + 14) + 'px';
    b.style.top = (e.clientY + 14) + 'px';
    b.style.display = 'block';
  });
  canvas.addEventListener('mouseleave', () => { box().style.display = 'none'; });
}

export function hideHover() { box().style.display = 'none'; }
