/**
 * The steered beams (`/api/beams`): the list, refreshed once a second while connected and right
 * after every change, the selected beam (a click on the history or map moves it), and the last
 * error. A server without the beams API (404) is remembered as such and not asked again until the
 * next connection.
 */
import { addBeam, getBeams, removeBeam, type Beam, type BeamMethod } from './api.ts';

export const BEAMS_POLL_MS = 1000;
/** Beams the dashboard will create; the server may allow fewer (its refusal is shown). */
export const MAX_BEAMS = 8;

export type BeamsAvailability = 'unknown' | 'available' | 'absent';

export class BeamStore {
  #beams = $state.raw<Beam[]>([]);
  #availability = $state<BeamsAvailability>('unknown');
  #error = $state<string | null>(null);
  #selectedId = $state<Beam['id'] | null>(null);
  #busy = $state(false);

  #timer: ReturnType<typeof setTimeout> | null = null;
  #running = false;
  #generation = 0;

  get beams(): Beam[] {
    return this.#beams;
  }
  get availability(): BeamsAvailability {
    return this.#availability;
  }
  get error(): string | null {
    return this.#error;
  }
  get busy(): boolean {
    return this.#busy;
  }
  get selectedId(): Beam['id'] | null {
    return this.#selectedId;
  }
  get selected(): Beam | null {
    return this.#beams.find((b) => b.id === this.#selectedId) ?? null;
  }

  select(id: Beam['id'] | null): void {
    this.#selectedId = this.#selectedId === id ? null : id;
  }

  clearError(): void {
    this.#error = null;
  }

  start(): void {
    if (this.#running) return;
    this.#running = true;
    this.#availability = 'unknown';
    void this.#poll(++this.#generation);
  }

  stop(): void {
    this.#running = false;
    this.#generation++;
    if (this.#timer) clearTimeout(this.#timer);
    this.#timer = null;
  }

  /** Fetch the list now (after a change). */
  async refresh(): Promise<void> {
    const r = await getBeams();
    if (r.ok) {
      const list = Array.isArray(r.data?.beams) ? r.data.beams : [];
      this.#beams = list;
      this.#availability = 'available';
      if (this.#selectedId !== null && !list.some((b) => b.id === this.#selectedId)) this.#selectedId = null;
    } else if (r.status === 404) {
      this.#availability = 'absent';
      this.#beams = [];
    } else {
      this.#error = r.message;
    }
  }

  /**
   * Point a beam at a direction: the selected beam moves there (removed and created anew, keeping
   * its method); with none selected a new beam is added.
   */
  async steer(azimuthDeg: number, elevationDeg: number | undefined, method: BeamMethod): Promise<void> {
    if (this.#availability === 'absent') {
      this.#error = 'this server has no beams API yet';
      return;
    }
    const moving = this.selected;
    if (!moving && this.#beams.length >= MAX_BEAMS) {
      this.#error = `at most ${MAX_BEAMS} beams: remove one, or select one to move it`;
      return;
    }
    this.#busy = true;
    try {
      if (moving) {
        const del = await removeBeam(moving.id);
        if (!del.ok && del.status !== 404) {
          this.#error = del.message;
          return;
        }
      }
      const body = { azimuthDeg: round2(azimuthDeg), method: moving?.method ?? method, ...(elevationDeg === undefined ? {} : { elevationDeg: round2(elevationDeg) }) };
      const r = await addBeam(body);
      if (r.ok) {
        this.#error = null;
        if (moving && r.data && r.data.id !== undefined) this.#selectedId = r.data.id;
      } else {
        this.#error = r.message;
        if (r.status === 404) this.#availability = 'absent';
      }
      await this.refresh();
    } finally {
      this.#busy = false;
    }
  }

  async remove(id: Beam['id']): Promise<void> {
    this.#busy = true;
    try {
      const r = await removeBeam(id);
      if (!r.ok) this.#error = r.message;
      else this.#error = null;
      if (this.#selectedId === id) this.#selectedId = null;
      await this.refresh();
    } finally {
      this.#busy = false;
    }
  }

  async #poll(gen: number): Promise<void> {
    await this.refresh();
    if (gen !== this.#generation || !this.#running) return;
    if (this.#availability === 'absent') return;
    this.#timer = setTimeout(() => void this.#poll(gen), BEAMS_POLL_MS);
  }
}

function round2(x: number): number {
  return Math.round(x * 100) / 100;
}
