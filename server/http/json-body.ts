/**
 * Request bodies in `application/json`: parsed here instead of by fastify's default parser so that
 * an empty body means no body (every mutating request carries the JSON content type, including a
 * DELETE or a POST without one), and nesting is limited before parsing: a body nested thousands of
 * levels deep is refused 400 at once, instead of overflowing the stack in whatever later walks it
 * (a validation message quoting it, a copy).
 */
import { HttpError } from './errors.ts';

/** Deepest nesting of arrays and objects accepted; every body the API takes needs 4. */
export const MAX_JSON_DEPTH = 32;

/** Nesting depth of a JSON text (brackets outside strings), stopping as soon as it passes `limit`. */
export function jsonDepthExceeds(text: string, limit: number): boolean {
  let depth = 0;
  let inString = false;
  for (let i = 0; i < text.length; i++) {
    const c = text.charCodeAt(i);
    if (inString) {
      if (c === 0x5c) i++; // backslash: skip the escaped character
      else if (c === 0x22) inString = false;
    } else if (c === 0x22) inString = true;
    else if (c === 0x5b || c === 0x7b) {
      if (++depth > limit) return true;
    } else if (c === 0x5d || c === 0x7d) depth--;
  }
  return false;
}

/**
 * @returns the parsed value, or undefined for an empty (or all-whitespace) body
 * @throws HttpError ERR_HTTP_BAD_BODY (400) for invalid JSON or nesting beyond MAX_JSON_DEPTH
 */
export function parseJsonBody(text: string): unknown {
  if (text.trim().length === 0) return undefined;
  if (jsonDepthExceeds(text, MAX_JSON_DEPTH)) throw new HttpError('ERR_HTTP_BAD_BODY', { detail: `request body is nested deeper than ${MAX_JSON_DEPTH} levels` });
  try {
    return JSON.parse(text);
  } catch (e) {
    throw new HttpError('ERR_HTTP_BAD_BODY', { detail: `request body is not valid JSON: ${(e as Error).message.slice(0, 200)}` });
  }
}
