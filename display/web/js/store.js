// The latest data from the server, shared by the parts of the page. Only
// main.js writes it, as messages arrive.
export const live = {
  snap: null,   // the latest tiles snapshot (display/tiles.go)
  details: {},  // unit id -> the latest full estimate (online.UnitDetail)
  order: [],    // ids of the units shown, in the order shown
};
