/**
 * Small typed helpers for the server's REST API (same origin). Every helper resolves — it never
 * throws — to `{ ok: true, data }` or `{ ok: false, message }`, where `message` is the server's own
 * `error.message` (e.g. "tauS: -1 out of range; allowed 0.01–3600 s") when it sent one; the
 * panels show it in their own words through shared/processing-fields.ts refusalMessage.
 */
import type { ProcessingDerived, ProcessingParams } from '../../../shared/messages.ts';

export type ApiResult<T> = { ok: true; data: T } | { ok: false; message: string; status: number; code?: string };

export interface ProcessingState {
  params: ProcessingParams;
  derived: ProcessingDerived;
}

/** What PATCH /api/processing accepts: any subset of the parameters, `tauS` instead of `lambda`. */
export type ProcessingPatch = Partial<ProcessingParams> & { tauS?: number };

export type BeamMethod = 'mvdr' | 'delay-and-sum';

export interface Beam {
  id: string | number;
  azimuthDeg: number;
  elevationDeg: number;
  method: BeamMethod;
  /** White noise gain of the beam's weights, dB. */
  wngDb: number;
  /** Response of the beam's weights over the live grid's directions, dB. */
  responseDb: number[];
}

export interface NewBeam {
  azimuthDeg: number;
  elevationDeg?: number;
  method?: BeamMethod;
}

let bearerToken: string | null = null;

/** Token sent as `Authorization: Bearer …` with every call (servers bound beyond loopback need one for changes, and for reads when status is closed). */
export function setApiToken(token: string | null): void {
  bearerToken = token && token.length > 0 ? token : null;
}

/** The token set by setApiToken (the live socket carries it as `?token=`: browsers cannot set its headers). */
export function apiToken(): string | null {
  return bearerToken;
}

/** One REST call: resolves, never throws; the server's own error message on refusal. */
export async function request<T>(method: string, path: string, body?: unknown): Promise<ApiResult<T>> {
  const headers: Record<string, string> = { accept: 'application/json' };
  // Every change carries the JSON content type, with a body or without: the server refuses other
  // types on mutating requests, so no other site's form or plain-text post can pass for one.
  if (body !== undefined || (method !== 'GET' && method !== 'HEAD')) headers['content-type'] = 'application/json';
  if (bearerToken) headers.authorization = `Bearer ${bearerToken}`;
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

export const getProcessing = (): Promise<ApiResult<ProcessingState>> => request('GET', '/api/processing');
export const patchProcessing = (patch: ProcessingPatch | Record<string, unknown>): Promise<ApiResult<ProcessingState>> => request('PATCH', '/api/processing', patch);
export const resetCovariance = (): Promise<ApiResult<void>> => request('POST', '/api/processing/reset');
export const getStatus = (): Promise<ApiResult<Record<string, unknown>>> => request('GET', '/api/status');
export const getBeams = (): Promise<ApiResult<{ beams: Beam[] }>> => request('GET', '/api/beams');
export const addBeam = (beam: NewBeam): Promise<ApiResult<Beam>> => request('POST', '/api/beams', beam);
/** `PUT /api/channels/mask`: exclude these channels from processing (`[]` uses all). */
export interface RecordingStatus {
  recording: boolean;
  frames: number;
  bytes: number;
  files: { track: string; wav: string; frames: number; closed: boolean }[];
  error: { code: string; message: string } | null;
  /** Why the last recording stopped by itself (e.g. the disk filled); null when stopped on request. */
  stopReason: { code: string; message: string } | null;
  /** The recordings folder as the server names it (its last name), null before the first start. */
  dir?: string | null;
  /** Recorded time on the stream's clock, seconds. */
  durationS?: number;
  /** Free space on the recordings' disk, bytes (null when unknown). */
  freeBytes?: number | null;
}
export interface RecordingRequest {
  raw?: boolean;
  beams?: boolean;
  encoding?: 'int16' | 'int24' | 'int32' | 'float32';
}
export const getRecording = (): Promise<ApiResult<RecordingStatus>> => request('GET', '/api/recording');
export const startRecording = (r: RecordingRequest): Promise<ApiResult<RecordingStatus>> => request('POST', '/api/recording', r);
export const stopRecording = (): Promise<ApiResult<RecordingStatus>> => request('DELETE', '/api/recording');
export const setChannelMask = (masked: number[]): Promise<ApiResult<{ channels: unknown[] }>> => request('PUT', '/api/channels/mask', { masked });
export const removeBeam = (id: Beam['id']): Promise<ApiResult<void>> => request('DELETE', `/api/beams/${encodeURIComponent(String(id))}`);

/** The comparison chain (GET/PUT/DELETE /api/compare, POST /api/compare/promote). */
export interface CompareState {
  enabled: boolean;
  params: ProcessingParams | null;
  derived: { tauS: number; hopSamples: number; sampleRateHz: number; directions: number; bins: number } | null;
  status: { load?: number; rows?: number; shed?: { step: number }; stages?: { stftMsPerHop: number; workerMsPerHop: number[] } } | null;
}
export type CompareSettings = { tauS?: number; lambda?: number; loading?: ProcessingParams['loading']; methods?: ProcessingParams['methods'] };
export const getCompare = (): Promise<ApiResult<CompareState>> => request('GET', '/api/compare');
export const setCompare = (s: CompareSettings): Promise<ApiResult<CompareState>> => request('PUT', '/api/compare', s);
export const stopCompare = (): Promise<ApiResult<CompareState>> => request('DELETE', '/api/compare');
export const promoteCompare = (side: 'compare' | 'main'): Promise<ApiResult<{ main: ProcessingState; compare: CompareState }>> => request('POST', '/api/compare/promote', { side });

/** `PUT /api/input/stream`: process this own-format stream from now on (journaled by the server). */
export const selectInputStream = (streamId: number): Promise<ApiResult<Record<string, unknown>>> => request('PUT', '/api/input/stream', { streamId });
