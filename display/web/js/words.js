// The words and names the page shares between its parts: the unit states,
// the JSON fields it reads, the sort keys and the densities. Change a word
// here and every part follows.

// WORD holds the status words as the server sends them (online.Status).
export const WORD = {collecting: 'collecting', emerging: 'emerging', reliable: 'reliable', noField: 'no field'};

// STATUS lists the unit states in the order a unit passes through them;
// css is the class that colours a tile and a badge. (A Go test checks the
// words, the field names and the densities here against the server's.)
export const STATUS = [
  {word: WORD.collecting, css: 's-collecting', hint: 'too few spikes to say anything yet'},
  {word: WORD.emerging, css: 's-emerging', hint: 'a significant field, not yet reliable'},
  {word: WORD.reliable, css: 's-reliable', hint: 'significant and reliable at the target'},
  {word: WORD.noField, css: 's-nofield', hint: 'enough spikes, still no significant linear field'},
];

const byWord = new Map(STATUS.map((s, i) => [s.word, {...s, rank: i}]));

// statusOf returns the entry of a status word; unknown words read as collecting.
export function statusOf(word) {
  return byWord.get(word) || byWord.get('collecting');
}

// FIELD names the JSON fields of a unit that the order, the filter and the
// sort keys read by name (display/tiles.go, online.UnitDetail).
export const FIELD = {
  id: 'id', status: 'status', spikes: 'spikes', reliability: 'reliability', significance: 'significance',
  eta: 'eta_s', rate: 'rate_hz', peakLag: 'peak_lag', latency: 'latency_ms',
  centreX: 'centre_x', centreY: 'centre_y', sigmaX: 'sigma_x', sigmaY: 'sigma_y', polarity: 'polarity',
  hasSTC: 'has_stc', flagged: 'flagged', stcState: 'stc_state',
  estimate: 'estimate', prior: 'prior', priorReliability: 'prior_reliability', priorETA: 'prior_eta_s',
  priorHyper: 'prior_hyper', priorBins: 'prior_bins',
  map: 'map', mapShape: 'map_shape', mapMax: 'map_max',
};

// ESTIMATE names the estimates a unit's status can come from, as the
// server sends them (online.EstimateRidge, online.EstimatePrior).
export const ESTIMATE = {ridge: 'ridge', prior: 'prior'};

// SORTS are the orders of the tiles: key (in the URL), label, the unit
// field compared, and the direction it starts in (desc: largest first).
export const SORTS = [
  {key: 'id', label: 'id', field: FIELD.id, desc: false},
  {key: 'status', label: 'status', field: FIELD.status, desc: false},
  {key: 'reliability', label: 'reliability', field: FIELD.reliability, desc: true},
  {key: 'significance', label: 'significance', field: FIELD.significance, desc: true},
  {key: 'eta', label: 'projected time', field: FIELD.eta, desc: false},
  {key: 'channel', label: 'channel', field: FIELD.id, desc: false},
];

// DENSITIES of the overview, from the most detail to the least; the server
// sends the tiles' maps at the density the page asks for (display.Density).
// auto picks one by the number of units.
export const DENSITIES = [
  {key: 'auto', label: 'Auto'},
  {key: 'large', label: 'Large'},
  {key: 'medium', label: 'Medium'},
  {key: 'compact', label: 'Compact'},
];

// autoDensity is the density auto stands for with n units.
export function autoDensity(n) {
  return n <= 64 ? 'large' : n <= 200 ? 'medium' : 'compact';
}

// UPDATE_BUDGET_S is the time between two updates of the estimates (the
// mapper's default update period); the page warns when an update takes a
// large part of it.
export const UPDATE_BUDGET_S = 1;
