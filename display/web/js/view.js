// What the experimenter is looking at, and the page's URL that carries it,
// so that a link reproduces the view: the tab, the density, the sort, the
// filter and the open unit (and the estimate shown in it).
import {DENSITIES, SORTS, STATUS} from './words.js';

export const view = {
  tab: 'units',        // units | population
  density: 'auto',     // DENSITIES key
  sort: 'id',          // SORTS key
  desc: false,         // reversed from the key's own direction?
  statuses: new Set(), // status words shown; empty: all
  text: '',            // shown ids contain this
  unit: null,          // id of the unit in the detail view
  kind: 'ridge',       // ridge | sta | z | prior, in the detail view
};

// The URL keys. token and practice are the page's own and are kept as they are.
const KEYS = ['tab', 'density', 'sort', 'order', 'status', 'q', 'unit', 'kind'];

// readURL sets the view from the URL; unknown values are ignored.
export function readURL() {
  const p = new URLSearchParams(location.search);
  if (p.get('tab') === 'population') view.tab = 'population';
  if (DENSITIES.some((d) => d.key === p.get('density'))) view.density = p.get('density');
  const sort = SORTS.find((s) => s.key === p.get('sort'));
  if (sort) view.sort = sort.key;
  const own = (sort || SORTS[0]).desc;
  if (p.get('order') === 'asc' || p.get('order') === 'desc') view.desc = p.get('order') === 'desc';
  else view.desc = own;
  view.statuses = new Set((p.get('status') || '').split(',').filter((w) => STATUS.some((s) => s.word === w)));
  view.text = p.get('q') || '';
  view.unit = p.get('unit') || null;
  if (['ridge', 'sta', 'z', 'prior'].includes(p.get('kind'))) view.kind = p.get('kind');
}

// writeURL puts the view into the URL without a new history entry; values
// at their defaults are left out.
export function writeURL() {
  const p = new URLSearchParams(location.search);
  for (const k of KEYS) p.delete(k);
  if (view.tab !== 'units') p.set('tab', view.tab);
  if (view.density !== 'auto') p.set('density', view.density);
  const sort = SORTS.find((s) => s.key === view.sort) || SORTS[0];
  if (sort.key !== 'id') p.set('sort', sort.key);
  if (view.desc !== sort.desc) p.set('order', view.desc ? 'desc' : 'asc');
  if (view.statuses.size) p.set('status', STATUS.map((s) => s.word).filter((w) => view.statuses.has(w)).join(','));
  if (view.text) p.set('q', view.text);
  if (view.unit !== null) p.set('unit', view.unit);
  if (view.unit !== null && view.kind !== 'ridge') p.set('kind', view.kind);
  const q = p.toString();
  history.replaceState(null, '', location.pathname + (q ? '?' + q : '') + location.hash);
}
