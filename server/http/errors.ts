/**
 * The HTTP error catalogue: every error the API returns has a code, an HTTP status and a message
 * template, and reaches the client in one JSON shape: `{ "error": { code, message, statusCode } }`.
 */

export const HTTP_ERRORS = {
  ERR_HTTP_NOT_FOUND: { statusCode: 404, template: 'no route for {method} {url}' },
  ERR_HTTP_VALIDATION: { statusCode: 400, template: '{detail}' },
  ERR_HTTP_BAD_BODY: { statusCode: 400, template: '{detail}' },
  ERR_HTTP_UNAUTHORIZED: { statusCode: 401, template: '{method} {url} needs the header Authorization: Bearer <token>' },
  ERR_HTTP_PRESET_NOT_FOUND: { statusCode: 404, template: 'no preset named {name}' },
  ERR_HTTP_PRESET_EXISTS: { statusCode: 409, template: 'a preset named {name} exists; to replace it, save again with ?overwrite=true' },
  ERR_HTTP_PRESET_INVALID: { statusCode: 422, template: 'preset {name} cannot be used: {detail}' },
  ERR_HTTP_BODY_TOO_LARGE: { statusCode: 413, template: 'request body exceeds {limit} bytes' },
  ERR_HTTP_HOST_REFUSED: { statusCode: 403, template: 'Host {host} is not a name of this server; add it to server.allowedHosts to allow it' },
  ERR_HTTP_ORIGIN_REFUSED: { statusCode: 403, template: 'requests from the web origin {origin} are refused; add it to server.allowedOrigins to allow it' },
  ERR_HTTP_UNSUPPORTED_MEDIA_TYPE: { statusCode: 415, template: '{method} {url} needs the header content-type: application/json' },
  ERR_HTTP_AUTH_LIMITED: { statusCode: 429, template: 'too many failed authentications from this client (limit {perS}/s, burst {burst}); retry after {retryS} s' },
  ERR_HTTP_RATE_LIMITED: { statusCode: 429, template: 'too many control requests from this client (limit {perS}/s, burst {burst}); retry after {retryS} s' },
  ERR_HTTP_PLAN_TOO_LARGE: { statusCode: 422, template: '{detail}' },
  ERR_HTTP_PLAN_REFUSED: { statusCode: 422, template: '{detail}' },
  ERR_HTTP_CHANGE_TIMEOUT: { statusCode: 503, template: '{detail}' },
  ERR_HTTP_RECORDING_ACTIVE: { statusCode: 409, template: 'a recording is already running ({detail}); stop it first' },
  ERR_HTTP_NOT_RECORDING: { statusCode: 409, template: 'no recording is running' },
  ERR_HTTP_RECORDING_EXISTS: { statusCode: 409, template: 'recording file names of this second are used up ({detail}); try again in a second' },
  ERR_HTTP_INSUFFICIENT_STORAGE: { statusCode: 507, template: 'not enough free space: {detail}' },
  ERR_HTTP_RECORDING_FAILED: { statusCode: 500, template: 'the recording could not start: {detail}' },
  ERR_HTTP_PRESET_WRITE_FAILED: { statusCode: 500, template: 'the preset could not be written: {detail}' },
  ERR_HTTP_UNKNOWN_STREAM: { statusCode: 404, template: 'no stream {streamId} has been received; streams seen: {seen}' },
  ERR_HTTP_INPUT_FIXED: { statusCode: 409, template: '{detail}' },
  ERR_HTTP_ARRAY_FILE_FAILED: { statusCode: 500, template: 'the array file could not be updated (it is unchanged): {detail}' },
  ERR_HTTP_CHECK_RUNNING: { statusCode: 409, template: 'an array check is already running (started {startedAt}); wait for its answer' },
  ERR_HTTP_CHECK_NO_INPUT: { statusCode: 503, template: 'the array check got {got} of {want} samples per channel in {waitedS} s: {detail}' },
  ERR_HTTP_CHECK_FAILED: { statusCode: 422, template: 'the array check could not run: {detail}' },
  ERR_HTTP_CALIBRATION_INVALID: { statusCode: 400, template: '{detail}' },
  ERR_HTTP_CALIBRATION_WRITE_FAILED: { statusCode: 500, template: 'the calibration could not be saved: {detail}' },
  ERR_HTTP_SECTOR_NOT_FOUND: { statusCode: 404, template: 'no sector named {name}' },
  ERR_HTTP_SECTORS_FULL: { statusCode: 409, template: '{detail}' },
  ERR_HTTP_RULE_NOT_FOUND: { statusCode: 404, template: 'no rule named {name}' },
  ERR_HTTP_RULES_FULL: { statusCode: 409, template: '{detail}' },
  ERR_HTTP_RULES_FILE_FAILED: { statusCode: 500, template: 'the rules could not be saved (they are unchanged): {detail}' },
  ERR_HTTP_CLIP_NOT_FOUND: { statusCode: 404, template: 'no clip named {name}' },
  ERR_HTTP_INTERNAL: { statusCode: 500, template: 'internal error; see the server log' },
} as const;

export type HttpErrorCode = keyof typeof HTTP_ERRORS;

export interface HttpErrorBody {
  error: { code: HttpErrorCode; message: string; statusCode: number };
}

export class HttpError extends Error {
  readonly code: HttpErrorCode;
  readonly statusCode: number;
  constructor(code: HttpErrorCode, params: Record<string, string | number> = {}) {
    const spec = HTTP_ERRORS[code];
    super(spec.template.replace(/\{(\w+)\}/g, (_, k: string) => String(params[k] ?? `{${k}}`)));
    this.name = 'HttpError';
    this.code = code;
    this.statusCode = spec.statusCode;
  }
  toJSON(): HttpErrorBody {
    return { error: { code: this.code, message: this.message, statusCode: this.statusCode } };
  }
}
