/**
 * REST calls of the session tools: the parameter journal and named presets, through api.ts's
 * `request` (resolves, never throws, to `{ ok: true, data }` or `{ ok: false, status, message,
 * code? }` with the server's own `error.message`; sends the bearer token).
 */
import type { ProcessingDerived, ProcessingParams } from '../../../shared/messages.ts';
import { request as call, type ApiResult } from './api.ts';

export type { Actor as JournalActor, JournalEntry, JournalPage, Preset, PresetListing } from '../../../shared/session.ts';
import type { JournalPage, Preset, PresetListing } from '../../../shared/session.ts';

const presetPath = (name: string): string => `/api/presets/${encodeURIComponent(name)}`;

/** `GET /api/journal?limit=N`: the newest `limit` entries of the current session, oldest first. */
export const getJournal = (limit = 50): Promise<ApiResult<JournalPage>> => call('GET', `/api/journal?limit=${encodeURIComponent(String(limit))}`);
export const listPresets = (): Promise<ApiResult<{ presets: PresetListing[] }>> => call('GET', '/api/presets');
/**
 * `PUT /api/presets/:name` with `{}`: save the parameters in force under `name`. A name in use is
 * refused (409, code `ERR_HTTP_PRESET_EXISTS`) unless `overwrite` (sent as `?overwrite=true`).
 */
export const savePreset = (name: string, overwrite = false): Promise<ApiResult<Preset>> => call('PUT', `${presetPath(name)}${overwrite ? '?overwrite=true' : ''}`, {});
/** `POST /api/presets/:name/apply`: the parameters as applied. */
export const applyPreset = (name: string): Promise<ApiResult<{ params: ProcessingParams; derived: ProcessingDerived }>> => call('POST', `${presetPath(name)}/apply`);
export const deletePreset = (name: string): Promise<ApiResult<void>> => call('DELETE', presetPath(name));
