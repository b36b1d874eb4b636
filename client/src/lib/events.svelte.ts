/**
 * The dashboard's monitoring events: the last MAX_EVENTS (200), newest first, from GET /api/events
 * at each (re)connection and the live `event` messages (started / updated / ended) in between; the
 * event selected in the Events panel, and a request counter the direction history follows to show
 * the selected event's span. Event levels are indicative (no class-rated meter, no traceable
 * calibration).
 */
import type { EventMessage } from '../../../shared/messages.ts';
import { request } from './api.ts';
import { isEvent, MAX_EVENTS, mergeEvents, type MonitorEvent } from './event-list.ts';

export class EventStore {
  /** Newest first, at most MAX_EVENTS; replaced wholesale on each change. */
  #events = $state.raw<MonitorEvent[]>([]);
  #selectedId = $state<string | null>(null);
  /** Counts requests to show the selected event on the history (each one moves the view once). */
  #showSerial = $state(0);
  /** What the history made of the last request: shown, or its start no longer held. */
  #shown = $state<'shown' | 'not-held' | null>(null);
  #error = $state<string | null>(null);
  #loadSerial = 0;

  get events(): MonitorEvent[] {
    return this.#events;
  }
  get selectedId(): string | null {
    return this.#selectedId;
  }
  get selected(): MonitorEvent | null {
    const id = this.#selectedId;
    return id === null ? null : (this.#events.find((e) => e.id === id) ?? null);
  }
  get showSerial(): number {
    return this.#showSerial;
  }
  get shown(): 'shown' | 'not-held' | null {
    return this.#shown;
  }
  get error(): string | null {
    return this.#error;
  }

  /** A live `event` message (LiveConnection.onEvent). */
  apply(msg: EventMessage): void {
    this.#events = mergeEvents(this.#events, [msg.event], MAX_EVENTS);
  }

  /** Ask GET /api/events (all the server keeps in memory) and merge its newest MAX_EVENTS in. */
  async load(): Promise<void> {
    const mine = ++this.#loadSerial;
    const r = await request<{ events?: unknown }>('GET', '/api/events');
    if (mine !== this.#loadSerial) return;
    if (!r.ok) {
      // A server without monitoring has no such route: nothing to show, not an error.
      this.#error = r.status === 404 ? null : r.message;
      return;
    }
    const list = Array.isArray(r.data.events) ? r.data.events.filter(isEvent) : [];
    this.#error = null;
    this.#events = mergeEvents(this.#events, list.slice(-MAX_EVENTS), MAX_EVENTS);
  }

  /** Select an event (null: none) and ask the history to show it. */
  select(id: string | null): void {
    this.#selectedId = id;
    this.#shown = null;
    if (id !== null) this.#showSerial++;
  }

  /** The history's answer to the last request. */
  noteShown(result: 'shown' | 'not-held'): void {
    this.#shown = result;
  }
}
