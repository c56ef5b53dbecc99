// Talking to the server: the token, JSON requests and the websocket.

const params = new URLSearchParams(location.search);

// token is the access token from the page's own URL (?token=), sent with
// every request when the server asks for one.
export const token = params.get('token') || '';

// withToken adds the token to a link (downloads cannot send headers).
export function withToken(path) {
  return token ? path + (path.includes('?') ? '&' : '?') + 'token=' + encodeURIComponent(token) : path;
}

function headers(json) {
  const h = json ? {'Content-Type': 'application/json'} : {};
  if (token) h['X-Livefield-Token'] = token;
  return h;
}

let report = () => {};

// onError sets where request errors are reported.
export function onError(f) { report = f; }

// post sends a JSON command; it returns the answer, or null after
// reporting the error.
export async function post(path, body) {
  try {
    const r = await fetch(path, {method: 'POST', headers: headers(true), body: JSON.stringify(body || {})});
    const v = await r.json().catch(() => ({}));
    if (!r.ok) { report(v.error || ('request failed: ' + r.status)); return null; }
    return v;
  } catch (e) {
    report('request failed: ' + e.message);
    return null;
  }
}

// NEED_TOKEN is what the page says when the server wants a token it was
// not given (the websocket cannot tell; the requests can).
const NEED_TOKEN = 'This server needs its access token: open the page with the URL livefield printed when it ' +
  'started (…/?token=…).';

// get fetches JSON; it returns null when the server is unreachable or
// answers with an error (the callers poll again).
export async function get(path) {
  try {
    const r = await fetch(path, {headers: headers(false)});
    if (r.status === 401) report(token ? 'The access token in this page\'s URL is not the server\'s.' : NEED_TOKEN);
    return r.ok ? await r.json() : null;
  } catch (e) {
    return null;
  }
}

// Live is the websocket to the hub: it reconnects forever and tells the
// hub which units' full estimates and which tile density the page wants.
export class Live {
  constructor(handlers) {
    this.handlers = handlers; // {message(m), up(), down()}
    this.ws = null;
    this.want = {view: [], density: 'compact'}; // the least until the page knows better
  }

  connect() {
    const u = new URL('ws', location.href);
    u.protocol = location.protocol === 'https:' ? 'wss:' : 'ws:';
    if (token) u.searchParams.set('token', token);
    u.searchParams.set('density', this.want.density); // the first update comes at it
    const ws = new WebSocket(u);
    this.ws = ws;
    ws.onopen = () => { this.handlers.up(); this.send(); };
    ws.onmessage = (e) => {
      let m;
      try { m = JSON.parse(e.data); } catch (err) { return; }
      this.handlers.message(m);
    };
    ws.onclose = () => {
      this.ws = null;
      this.handlers.down();
      setTimeout(() => this.connect(), 1000);
    };
  }

  // ask sets the units in view and the density, and tells the hub.
  ask(view, density) {
    const same = density === this.want.density && view.length === this.want.view.length &&
      view.every((id, i) => id === this.want.view[i]);
    this.want = {view, density};
    if (!same) this.send();
  }

  send() {
    if (this.ws && this.ws.readyState === WebSocket.OPEN) this.ws.send(JSON.stringify(this.want));
  }
}
