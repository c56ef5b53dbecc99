// The order and the filter of the units.
import {ESTIMATE, FIELD, SORTS, statusOf} from './words.js';

// naturalCompare orders ids with digit runs compared as numbers ("2"
// before "10", "007" equal to "7"), other characters one by one; the server
// sorts the same way (display/png.go, naturalCompare), and a browser test
// checks that the two agree.
export function naturalCompare(a, b) {
  let i = 0, j = 0;
  while (i < a.length && j < b.length) {
    const da = digitRun(a, i), db = digitRun(b, j);
    if (da > 0 && db > 0) {
      const na = a.slice(i, i + da).replace(/^0+/, ''), nb = b.slice(j, j + db).replace(/^0+/, '');
      if (na.length !== nb.length) return na.length - nb.length;
      if (na !== nb) return na < nb ? -1 : 1;
      i += da; j += db;
      continue;
    }
    const ca = a.charCodeAt(i), cb = b.charCodeAt(j);
    if (ca !== cb) return ca - cb;
    i++; j++;
  }
  return (a.length - i) - (b.length - j);
}

function digitRun(s, from) {
  let n = 0;
  while (from + n < s.length && s.charCodeAt(from + n) >= 48 && s.charCodeAt(from + n) <= 57) n++;
  return n;
}

// channelOf is the recording channel a unit id names: the first number in
// it ("ch12.3" and "12-3" are on channel 12); ids without one sort last.
export function channelOf(id) {
  const m = /\d+/.exec(id);
  return m ? Number(m[0]) : Infinity;
}

function defined(v) {
  return v !== null && v !== undefined && isFinite(v);
}

// compareBy returns the comparison of two units for a sort key; desc
// reverses it. Undefined numbers sort last in either direction; ties go
// by natural id order.
export function compareBy(key, desc) {
  const sort = SORTS.find((s) => s.key === key) || SORTS[0];
  const sign = desc ? -1 : 1;
  let primary;
  if (sort.key === 'id') {
    primary = (a, b) => sign * naturalCompare(a[FIELD.id], b[FIELD.id]);
  } else if (sort.key === 'status') {
    primary = (a, b) => sign * (statusOf(a[FIELD.status]).rank - statusOf(b[FIELD.status]).rank);
  } else if (sort.key === 'channel') {
    primary = (a, b) => {
      const x = channelOf(a[FIELD.id]), y = channelOf(b[FIELD.id]);
      return x === y ? 0 : x === Infinity ? 1 : y === Infinity ? -1 : sign * (x - y);
    };
  } else {
    // Reliability sorts by the reliability the status comes from, the one
    // the tile shows.
    const value = sort.key === 'reliability' ? (u) => statusReliability(u).value : (u) => u[sort.field];
    primary = (a, b) => {
      const x = value(a), y = value(b);
      if (!defined(x) || !defined(y)) return defined(x) ? -1 : defined(y) ? 1 : 0;
      return sign * (x - y);
    };
  }
  return (a, b) => primary(a, b) || naturalCompare(a[FIELD.id], b[FIELD.id]);
}

// statusReliability is the reliability of the estimate a unit's status
// comes from (online.UnitSummary.estimate) and which estimate that is:
// the smooth-local prior's when the status comes from it, else the
// ridge's (also for units not significant, whose estimate is empty).
export function statusReliability(u) {
  if (u[FIELD.estimate] === ESTIMATE.prior) return {value: u[FIELD.priorReliability], from: ESTIMATE.prior};
  return {value: u[FIELD.reliability], from: ESTIMATE.ridge};
}

// visibleUnits is the units that pass the filter, in the chosen order.
// statuses is a Set of status words (empty: all); text must appear in the id
// (case does not matter).
export function visibleUnits(units, view) {
  const text = (view.text || '').trim().toLowerCase();
  return (units || [])
    .filter((u) => (view.statuses.size === 0 || view.statuses.has(u[FIELD.status])) &&
      (!text || u[FIELD.id].toLowerCase().includes(text)))
    .sort(compareBy(view.sort, view.desc));
}
