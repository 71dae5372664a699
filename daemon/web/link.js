// The page's link to the rig: the token, requests, commands with request ids, the event stream.
// The token travels only in the Authorization header, never in an address, so it cannot
// reach an access log; a browser EventSource cannot send that header, so the event stream
// is read with fetch() and a streamed body.

const TOKEN_KEY = "taprig.token";
const TOKEN_RE = /^[A-Za-z0-9_-]{32,128}$/;
// The rig sends a heartbeat every 1.5 s (daemon/api/routes.py): past this the stream is dead,
// so lost Wi-Fi shows within 5 s, and a heartbeat may come a whole beat late first.
const SILENCE_MS = 4000;
const COMMAND_TRIES_MS = 15000; // how long a command is retried over a failing network

/** The token from `text`: a pairing address (…#token=…) or the bare token; null if neither. */
export function tokenFrom(text) {
  const s = (text || "").trim();
  const m = /[#&?]token=([A-Za-z0-9_-]+)/.exec(s);
  const t = m ? m[1] : s;
  return TOKEN_RE.test(t) ? t : null;
}

/** Keep a token handed over in the address fragment, then wipe it from the address bar. */
export function takeTokenFromAddress() {
  if (location.hash) {
    const t = tokenFrom(location.hash);
    if (t) localStorage.setItem(TOKEN_KEY, t);
    history.replaceState(null, "", location.pathname + location.search);
  }
  return localStorage.getItem(TOKEN_KEY);
}

export function saveToken(t) { localStorage.setItem(TOKEN_KEY, t); }
export function forgetToken() { localStorage.removeItem(TOKEN_KEY); }

/** A request id the rig accepts (8..64 of A-Z a-z 0-9 _ -), 128 random bits. */
export function newRequestId() {
  // crypto.randomUUID needs a secure context; a rig on the shop LAN is plain http.
  const b = crypto.getRandomValues(new Uint8Array(16));
  return "ph-" + Array.from(b, (x) => x.toString(16).padStart(2, "0")).join("");
}

const sleep = (ms) => new Promise((r) => setTimeout(r, ms));

export class Unauthorized extends Error {}

export class Rig {
  /** token: the rig's token; onUnauthorized(): called when the rig refuses it. */
  constructor(token, onUnauthorized) {
    this.token = token;
    this.onUnauthorized = onUnauthorized;
  }

  headers(extra = {}) {
    return { Authorization: `Bearer ${this.token}`, ...extra };
  }

  /** GET `path`; the JSON body, or null for a 404. Throws on other failures. */
  async get(path) {
    const r = await fetch(path, { headers: this.headers(), cache: "no-store",
                                  signal: AbortSignal.timeout(10000) });
    if (r.status === 401) { this.onUnauthorized(); throw new Unauthorized(path); }
    if (r.status === 404) return null;
    if (!r.ok) throw new Error(`${path}: HTTP ${r.status}`);
    return r.json();
  }

  /** POST /v1/session/<action>; see post. */
  command(action, fields = {}) { return this.post(`/v1/session/${action}`, fields); }

  /**
   * POST `fields` to `path` with one request id for every try: if the answer is lost
   * (Wi-Fi drops after the rig acted), the retry gets the first answer and the rig acts once.
   * Returns {ok, status, body}.
   */
  async post(path, fields = {}) {
    const body = JSON.stringify({ request_id: newRequestId(), ...fields });
    const deadline = performance.now() + COMMAND_TRIES_MS;
    for (let pause = 250; ; pause = Math.min(pause * 2, 2000)) {
      try {
        const r = await fetch(path, {
          method: "POST", body, cache: "no-store", signal: AbortSignal.timeout(5000),
          headers: this.headers({ "Content-Type": "application/json" }),
        });
        if (r.status === 401) { this.onUnauthorized(); throw new Unauthorized(path); }
        if (r.status === 502 || r.status === 504) throw new Error(`HTTP ${r.status}`);
        return { ok: r.ok, status: r.status, body: await r.json() };
      } catch (e) {
        if (e instanceof Unauthorized || performance.now() + pause > deadline) throw e;
        await sleep(pause);
      }
    }
  }
}

/**
 * The rig's server-sent events over fetch, reconnected for ever after any failure.
 * handlers: onEvent(kind, data), onOpen() (after each (re)connection: catch up on what
 * was missed), onStatus(state, detail) with state "connecting" | "live" | "down".
 */
export class EventStream {
  constructor(rig, handlers) {
    this.rig = rig;
    this.h = handlers;
    this.retryMs = 2000;
    this.stopped = false;
    this.wake = null;
    this.controller = null;
    this.reconnects = -1;
    addEventListener("online", () => this.now());
    this.heard = 0; // Date.now() of the last bytes from the stream
    document.addEventListener("visibilitychange", () => {
      if (document.visibilityState !== "visible") return;
      // A phone that slept may hold a connection that died meanwhile: start a fresh one.
      if (this.controller && Date.now() - this.heard > SILENCE_MS) this.controller.abort();
      this.now();
    });
  }

  start() { this.loop(); }

  stop() { this.stopped = true; this.controller?.abort(); this.now(); }

  /** Reconnect at once (the network came back, or the page is shown again). */
  now() { this.wake?.(); }

  async loop() {
    let pause = 500;
    while (!this.stopped) {
      this.reconnects += 1;
      this.h.onStatus("connecting", "");
      let failure = "closed by the rig";
      try {
        await this.read();
        pause = 500;
      } catch (e) {
        if (e instanceof Unauthorized) return;
        failure = e.name === "AbortError" ? "silent for too long" : String(e.message || e);
      }
      if (this.stopped) return;
      this.h.onStatus("down", failure);
      await new Promise((r) => { this.wake = r; setTimeout(r, Math.max(pause, this.retryMs / 4)); });
      this.wake = null;
      pause = Math.min(pause * 2, Math.max(this.retryMs, 5000));
    }
  }

  async read() {
    const controller = new AbortController();
    this.controller = controller;
    let watchdog = 0;
    const kick = () => {
      this.heard = Date.now();
      clearTimeout(watchdog);
      watchdog = setTimeout(() => controller.abort(), SILENCE_MS);
    };
    try {
      kick();
      const r = await fetch("/v1/events", { headers: this.rig.headers(), cache: "no-store",
                                            signal: controller.signal });
      if (r.status === 401) { this.rig.onUnauthorized(); throw new Unauthorized("events"); }
      if (!r.ok) throw new Error(`HTTP ${r.status}`);
      this.h.onStatus("live", "");
      await this.h.onOpen();
      const reader = r.body.getReader();
      const text = new TextDecoder();
      let buffer = "";
      for (;;) {
        const { value, done } = await reader.read();
        if (done) return;
        kick();
        buffer += text.decode(value, { stream: true }).replace(/\r\n?/g, "\n");
        let end;
        while ((end = buffer.indexOf("\n\n")) >= 0) {
          this.frame(buffer.slice(0, end));
          buffer = buffer.slice(end + 2);
        }
      }
    } finally {
      clearTimeout(watchdog);
      controller.abort();
    }
  }

  /** One event block of the stream (HTML Living Standard, server-sent events §9.2.6). */
  frame(block) {
    let kind = "message";
    const data = [];
    for (const line of block.split("\n")) {
      if (!line || line.startsWith(":")) continue;
      const colon = line.indexOf(":");
      const field = colon < 0 ? line : line.slice(0, colon);
      const value = colon < 0 ? "" : line.slice(colon + 1).replace(/^ /, "");
      if (field === "event") kind = value;
      else if (field === "data") data.push(value);
      else if (field === "retry" && /^\d+$/.test(value)) this.retryMs = Number(value);
    }
    if (!data.length) return;
    let parsed;
    try { parsed = JSON.parse(data.join("\n")); } catch { return; }
    this.h.onEvent(kind, parsed);
  }
}
