/**
 * REST calls of the session tools: the parameter journal and named presets. Same contract as
 * api.ts (whose `request` is private): every call resolves, never throws, to `{ ok: true, data }`
 * or `{ ok: false, status, message, code? }` with the server's own `error.message`, and sends the
 * bearer token set through api.ts's setApiToken.
 */
import type { ProcessingDerived, ProcessingParams } from '../../../shared/messages.ts';
import { apiToken, type ApiResult } from './api.ts';

export interface JournalActor {
  remote: string;
  agent: string | null;
}

export interface JournalEntry {
  seq: number;
  session: string;
  /** ISO 8601 wall clock of the change. */
  at: string;
  /** Next stream sample when the change was applied (null before any input). */
  sampleIndex: number | null;
  actor: JournalActor;
  kind: string;
  summary: string;
  before: unknown;
  after: unknown;
}

export interface JournalPage {
  session: { id: string; startedAt: string };
  total: number;
  /** Oldest first (newest last). */
  entries: JournalEntry[];
}

export type PresetListing = { name: string; savedAt: string; valid: true } | { name: string; valid: false; error: string };

export interface Preset {
  name: string;
  savedAt: string;
  params: ProcessingParams;
}

async function call<T>(method: string, path: string, body?: unknown): Promise<ApiResult<T>> {
  const headers: Record<string, string> = { accept: 'application/json' };
  if (body !== undefined) headers['content-type'] = 'application/json';
  const token = apiToken();
  if (token) headers.authorization = `Bearer ${token}`;
  let res: Response;
  try {
    res = await fetch(path, { method, headers, body: body === undefined ? undefined : JSON.stringify(body), cache: 'no-store' });
  } catch (e) {
    return { ok: false, status: 0, message: `server unreachable (${(e as Error).message})` };
  }
  const text = await res.text().catch(() => '');
  let json: unknown = undefined;
  if (text.length > 0) {
    try {
      json = JSON.parse(text);
    } catch {
      json = undefined;
    }
  }
  if (!res.ok) {
    const err = (json as { error?: { message?: unknown; code?: unknown } } | undefined)?.error;
    const message = typeof err?.message === 'string' ? err.message : `HTTP ${res.status}${res.statusText ? ` ${res.statusText}` : ''}`;
    return { ok: false, status: res.status, message, code: typeof err?.code === 'string' ? err.code : undefined };
  }
  if (res.status !== 204 && text.length > 0 && json === undefined) return { ok: false, status: res.status, message: 'the server answered with something that is not JSON' };
  return { ok: true, data: json as T };
}

const presetPath = (name: string): string => `/api/presets/${encodeURIComponent(name)}`;

/** `GET /api/journal?limit=N`: the newest `limit` entries of the current session, oldest first. */
export const getJournal = (limit = 50): Promise<ApiResult<JournalPage>> => call('GET', `/api/journal?limit=${encodeURIComponent(String(limit))}`);
export const listPresets = (): Promise<ApiResult<{ presets: PresetListing[] }>> => call('GET', '/api/presets');
/** `PUT /api/presets/:name` with `{}`: save the parameters in force under `name`. */
export const savePreset = (name: string): Promise<ApiResult<Preset>> => call('PUT', presetPath(name), {});
/** `POST /api/presets/:name/apply`: the parameters as applied. */
export const applyPreset = (name: string): Promise<ApiResult<{ params: ProcessingParams; derived: ProcessingDerived }>> => call('POST', `${presetPath(name)}/apply`);
export const deletePreset = (name: string): Promise<ApiResult<void>> => call('DELETE', presetPath(name));
