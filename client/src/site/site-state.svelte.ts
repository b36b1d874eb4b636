/**
 * The site page's state: the live socket `/api/site/live` (hello, then one message per window and
 * per node change), reconnecting with back-off when it drops. Large data is replaced wholesale.
 */
import type { SiteLiveMessage, SiteNodeView, SitePlanView, SiteView, SourcesView } from '../../../shared/site-view.ts';

export type SiteConnection = 'connecting' | 'online' | 'offline';

const EMPTY: SourcesView = { windowUtc: null, windowIndex: null, sources: [], bearings: [] };

export class SiteState {
  #status = $state<SiteConnection>('connecting');
  #site = $state.raw<SiteView | null>(null);
  #plan = $state.raw<SitePlanView | null>(null);
  #nodes = $state.raw<SiteNodeView[]>([]);
  #sources = $state.raw<SourcesView>(EMPTY);
  #ws: WebSocket | null = null;
  #retryMs = 500;
  #timer: ReturnType<typeof setTimeout> | null = null;
  #stopped = false;

  get status() {
    return this.#status;
  }
  get site() {
    return this.#site;
  }
  get plan() {
    return this.#plan;
  }
  get nodes() {
    return this.#nodes;
  }
  get sources() {
    return this.#sources;
  }

  start(): void {
    this.#stopped = false;
    this.#open();
  }

  stop(): void {
    this.#stopped = true;
    if (this.#timer) clearTimeout(this.#timer);
    this.#ws?.close();
    this.#ws = null;
  }

  #open(): void {
    const url = `${location.protocol === 'https:' ? 'wss:' : 'ws:'}//${location.host}/api/site/live`;
    const ws = new WebSocket(url);
    this.#ws = ws;
    this.#status = 'connecting';
    ws.onmessage = (ev) => {
      let m: SiteLiveMessage;
      try {
        m = JSON.parse(String(ev.data)) as SiteLiveMessage;
      } catch {
        return;
      }
      this.#take(m);
    };
    ws.onopen = () => {
      this.#status = 'online';
      this.#retryMs = 500;
    };
    ws.onclose = () => {
      if (this.#ws !== ws) return;
      this.#status = 'offline';
      if (this.#stopped) return;
      this.#timer = setTimeout(() => this.#open(), this.#retryMs);
      this.#retryMs = Math.min(this.#retryMs * 2, 8000);
    };
  }

  #take(m: SiteLiveMessage): void {
    if (m.type === 'hello') {
      this.#site = m.site;
      this.#plan = m.plan;
      this.#nodes = m.site.nodes;
      this.#sources = { windowUtc: m.windowUtc, windowIndex: m.windowIndex, sources: m.sources, bearings: m.bearings };
    } else if (m.type === 'window') {
      this.#nodes = m.nodes;
      this.#sources = { windowUtc: m.windowUtc, windowIndex: m.windowIndex, sources: m.sources, bearings: m.bearings };
      if (this.#site) this.#site = { ...this.#site, counters: m.counters, nodes: m.nodes };
    } else if (m.type === 'nodes') {
      this.#nodes = m.nodes;
    }
  }
}
