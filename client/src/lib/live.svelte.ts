/**
 * The dashboard's one live connection: the WebSocket to `/api/live` (same origin), decoding
 * binary spectrum rows with shared/messages.ts decodeRow and JSON messages with
 * parseServerMessage. It keeps the connection state, the latest `hello` (grid, parameters,
 * array), the latest row, the row history ring, and counters (rows/s, rows missed by sequence
 * gaps, rows arriving late), and reconnects by itself with a backoff of 0.5 s doubling to 5 s.
 *
 * Reactivity: per-row data is `$state.raw`, replaced wholesale on each row; the history ring is
 * a plain object outside reactive state (views read it when `rows` changes); `historyEpoch`
 * changes when the ring is replaced (grid change).
 */
import {
  decodeRow,
  parseServerMessage,
  type EventMessage,
  type HelloMessage,
  type LiveGrid,
  type ProcessingDerived,
  type ProcessingParams,
  type SpectrumRow,
  type StatusMessage,
} from '../../../shared/messages.ts';
import { apiToken, getProcessing, type ProcessingState } from './api.ts';
import { RowHistory } from './history.ts';
import { partialIsRecent, PARTIAL_RECENT_ROWS } from './partial-marks.ts';

export type ConnectionState = 'connecting' | 'online' | 'offline';

export const RECONNECT_MIN_MS = 500;
export const RECONNECT_MAX_MS = 5000;
const RATE_WINDOW_MS = 1000;
/** A row this much later than the quickest delivery seen is counted late (clock-offset free). */
const LATE_MS = 500;

/** ws:// or wss:// URL of `path` on the page's own origin, with `?token=` when a token is given. */
export function liveUrl(path = '/api/live', loc: Location = location, token: string | null = apiToken()): string {
  const q = token ? `?token=${encodeURIComponent(token)}` : '';
  return `${loc.protocol === 'https:' ? 'wss:' : 'ws:'}//${loc.host}${path}${q}`;
}

function sameAxis(a: ArrayLike<number>, b: ArrayLike<number>): boolean {
  if (a.length !== b.length) return false;
  for (let i = 0; i < a.length; i++) if (Math.abs(a[i] - b[i]) > 1e-9) return false;
  return true;
}

export class LiveConnection {
  readonly url: string;

  #status = $state<ConnectionState>('connecting');
  #hello = $state.raw<HelloMessage | null>(null);
  #params = $state.raw<ProcessingParams | null>(null);
  #derived = $state.raw<ProcessingDerived | null>(null);
  #latest = $state.raw<SpectrumRow | null>(null);
  #statusMessage = $state.raw<StatusMessage | null>(null);
  /** Rows accepted since the page loaded: the redraw trigger. */
  #rows = $state(0);
  #rowsPerS = $state(0);
  #missed = $state(0);
  #late = $state(0);
  #outOfOrder = $state(0);
  #rejected = $state(0);
  #lastProblem = $state<string | null>(null);
  #historyEpoch = $state(0);
  /** Successful opens (1 after the first connection, +1 per reconnect). */
  #opens = $state(0);
  /** Issue 17: partial rows accepted, and the `rows` count the last one was accepted at (−1: none). */
  #partialRows = $state(0);
  #lastPartialRow = $state(-1);

  #history: RowHistory | null = null;
  #ws: WebSocket | null = null;
  #retryMs = RECONNECT_MIN_MS;
  #retryTimer: ReturnType<typeof setTimeout> | null = null;
  #rateTimer: ReturnType<typeof setInterval> | null = null;
  #rateRows = 0;
  #rateSinceMs = 0;
  #lastSeq = -1;
  #minDelayMs = Infinity;
  #paramsSerial = 0;
  #started = false;

  /** Called with each live monitoring `event` message (the dashboard's EventStore, issue 16). */
  onEvent: ((msg: EventMessage) => void) | null = null;

  constructor(url: string = liveUrl()) {
    this.url = url;
  }

  get status(): ConnectionState {
    return this.#status;
  }
  get hello(): HelloMessage | null {
    return this.#hello;
  }
  get grid(): LiveGrid | null {
    return this.#hello?.grid ?? null;
  }
  get params(): ProcessingParams | null {
    return this.#params;
  }
  get derived(): ProcessingDerived | null {
    return this.#derived;
  }
  /** The newest row that fits the current grid. */
  get latest(): SpectrumRow | null {
    return this.#latest;
  }
  get statusMessage(): StatusMessage | null {
    return this.#statusMessage;
  }
  get rows(): number {
    return this.#rows;
  }
  get rowsPerS(): number {
    return this.#rowsPerS;
  }
  /** Rows never received: gaps in `seq` (the server drops rows for a client that falls behind). */
  get missed(): number {
    return this.#missed;
  }
  /** Rows delivered more than 0.5 s later than the quickest delivery seen. */
  get late(): number {
    return this.#late;
  }
  get outOfOrder(): number {
    return this.#outOfOrder;
  }
  /** Messages refused by the decoders, or rows not matching the grid. */
  get rejected(): number {
    return this.#rejected;
  }
  get lastProblem(): string | null {
    return this.#lastProblem;
  }
  get opens(): number {
    return this.#opens;
  }
  /** Partial rows accepted since the page loaded (SpectrumRow.partial: some bins missing). */
  get partialRows(): number {
    return this.#partialRows;
  }
  /** One of the last {@link PARTIAL_RECENT_ROWS} accepted rows was partial. */
  get partialRecent(): boolean {
    return partialIsRecent(this.#rows, this.#lastPartialRow);
  }
  /** Changes whenever {@link history} is replaced. */
  get historyEpoch(): number {
    return this.#historyEpoch;
  }
  /** The row history ring (not reactive; read it when `rows` or `historyEpoch` change). */
  get history(): RowHistory | null {
    return this.#history;
  }

  start(): void {
    if (this.#started) return;
    this.#started = true;
    this.#rateSinceMs = performance.now();
    this.#rateTimer = setInterval(() => this.#measureRate(), RATE_WINDOW_MS);
    this.#open();
  }

  stop(): void {
    this.#started = false;
    if (this.#retryTimer) clearTimeout(this.#retryTimer);
    if (this.#rateTimer) clearInterval(this.#rateTimer);
    this.#retryTimer = null;
    this.#rateTimer = null;
    const ws = this.#ws;
    this.#ws = null;
    if (ws) {
      ws.onopen = ws.onclose = ws.onerror = ws.onmessage = null;
      ws.close(1000, 'dashboard closed');
    }
    this.#status = 'offline';
  }

  /** Take the parameters a REST answer echoed (PATCH / GET /api/processing). */
  applyProcessing(state: ProcessingState): void {
    this.#paramsSerial++;
    this.#params = state.params;
    if (state.derived) this.#derived = state.derived;
  }

  #open(): void {
    if (!this.#started) return;
    let ws: WebSocket;
    try {
      ws = new WebSocket(this.url);
    } catch (e) {
      this.#lastProblem = `cannot open ${this.url}: ${(e as Error).message}`;
      this.#scheduleReconnect();
      return;
    }
    ws.binaryType = 'arraybuffer';
    this.#ws = ws;
    ws.onopen = () => {
      this.#status = 'online';
      this.#opens++;
      this.#retryMs = RECONNECT_MIN_MS;
      this.#lastSeq = -1;
      this.#minDelayMs = Infinity;
      this.#refetchParams();
    };
    ws.onmessage = (ev: MessageEvent) => {
      if (typeof ev.data === 'string') this.#onText(ev.data);
      else if (ev.data instanceof ArrayBuffer) this.#onRow(ev.data);
    };
    // An error is always followed by close; reconnecting is close's job.
    ws.onerror = () => {};
    ws.onclose = (ev: CloseEvent) => {
      if (this.#ws !== ws) return;
      this.#ws = null;
      this.#status = 'offline';
      if (ev.code !== 1000 && ev.code !== 1005 && ev.code !== 1006) this.#lastProblem = `closed by the server: ${ev.code}${ev.reason ? ` ${ev.reason}` : ''}`;
      this.#scheduleReconnect();
    };
  }

  #scheduleReconnect(): void {
    if (!this.#started) return;
    this.#status = 'offline';
    const wait = this.#retryMs;
    this.#retryMs = Math.min(RECONNECT_MAX_MS, this.#retryMs * 2);
    this.#retryTimer = setTimeout(() => {
      this.#retryTimer = null;
      this.#open();
    }, wait);
  }

  #refetchParams(): void {
    const serial = this.#paramsSerial;
    void getProcessing().then((r) => {
      // A hello or params message that came meanwhile is at least as new.
      if (r.ok && serial === this.#paramsSerial) this.applyProcessing(r.data);
    });
  }

  #onText(text: string): void {
    let msg;
    try {
      msg = parseServerMessage(text);
    } catch (e) {
      this.#rejected++;
      this.#lastProblem = `message refused: ${(e as Error).message}`;
      return;
    }
    switch (msg.type) {
      case 'hello':
        this.#applyHello(msg);
        break;
      case 'params':
        this.#paramsSerial++;
        this.#params = msg.params;
        if (msg.derived) this.#derived = msg.derived;
        break;
      case 'status':
        this.#statusMessage = msg;
        break;
      case 'event':
        this.onEvent?.(msg);
        break;
    }
  }

  #applyHello(h: HelloMessage): void {
    this.#paramsSerial++;
    const old = this.#history;
    if (!old || !sameAxis(old.azimuthDeg, h.grid.azimuthDeg)) {
      this.#history = old ? old.resampled(h.grid.azimuthDeg) : new RowHistory(h.grid.azimuthDeg);
      this.#historyEpoch++;
    }
    const prev = this.#hello;
    if (!prev || prev.grid.nAz !== h.grid.nAz || prev.grid.nEl !== h.grid.nEl) this.#latest = null;
    this.#hello = h;
    this.#params = h.params;
    if (h.derived) this.#derived = h.derived;
  }

  #onRow(buf: ArrayBuffer): void {
    const now = performance.now();
    let row: SpectrumRow;
    try {
      row = decodeRow(new Uint8Array(buf));
    } catch (e) {
      this.#rejected++;
      this.#lastProblem = `row refused: ${(e as Error).message}`;
      return;
    }
    if (this.#lastSeq >= 0) {
      const d = (row.seq - this.#lastSeq) >>> 0;
      if (d === 0 || d > 0x80000000) this.#outOfOrder++;
      else if (d > 1) this.#missed += d - 1;
    }
    this.#lastSeq = row.seq;
    const delayMs = Date.now() - row.emittedAtMs;
    if (delayMs < this.#minDelayMs) this.#minDelayMs = delayMs;
    else if (delayMs - this.#minDelayMs > LATE_MS) this.#late++;

    const g = this.#hello?.grid;
    const h = this.#history;
    if (!g || !h || row.nAz !== g.nAz || row.nEl !== g.nEl || !h.fits(row)) {
      this.#rejected++;
      this.#lastProblem = `row ${row.seq} has ${row.nAz}×${row.nEl} directions, the grid ${g ? `${g.nAz}×${g.nEl}` : 'is not known yet'}`;
      return;
    }
    h.push(row, now, this.#derived?.sampleRateHz);
    this.#latest = row;
    this.#rateRows++;
    this.#rows++;
    if (row.partial) {
      this.#partialRows++;
      this.#lastPartialRow = this.#rows;
    }
  }

  #measureRate(): void {
    const now = performance.now();
    const dt = now - this.#rateSinceMs;
    if (dt <= 0) return;
    this.#rowsPerS = Math.round((this.#rateRows * 10000) / dt) / 10;
    this.#rateRows = 0;
    this.#rateSinceMs = now;
  }
}
