/**
 * Event clips over REST (issue 16 items 3–4; server/monitor/clips.ts writes them):
 *   GET /api/clips/FILE → the file from outputs.dir/clips, `audio/wav` for `…-beam.wav` and
 *   `…-raw.wav`, `application/json` for the sidecar `…-beam.json`.
 * FILE must match {@link CLIP_FILE}: an event id (letters, digits, _ - and no other character, so
 * no path separator, dot segment or percent-escape reaches the file system) and one of the three
 * endings; anything else, and a name that matches but is not on disk, is 404 ERR_HTTP_CLIP_NOT_FOUND.
 * A single `Range: bytes=a-b` is answered 206 (the dashboard's audio element seeks with it); an
 * unsatisfiable one is 416. The file is streamed, never read whole (a raw clip can be large). The
 * levels a clip carries are indicative (no class-rated meter, no traceable calibration); a clip is
 * audio of whoever was in the sector: recording people is regulated.
 */
import { createReadStream } from 'node:fs';
import { stat } from 'node:fs/promises';
import { join } from 'node:path';
import type { FastifyPluginAsync } from 'fastify';
import { HttpError } from '../errors.ts';

/** Clip file names served: an event id (1–160 of A–Z a–z 0–9 _ -), then -beam.wav, -raw.wav or -beam.json. */
export const CLIP_FILE = /^[A-Za-z0-9_-]{1,160}-(beam\.wav|raw\.wav|beam\.json)$/;

/** The content type of a clip file name that matches {@link CLIP_FILE}. */
export function clipContentType(file: string): string {
  return file.endsWith('.json') ? 'application/json; charset=utf-8' : 'audio/wav';
}

/**
 * The byte span a `Range` header asks for within a file of `sizeBytes`: null when absent or not a
 * single byte range (the whole file is sent), 'unsatisfiable' when it lies beyond the file
 * (RFC 9110 §14.1.2 byte-range forms: `a-b`, `a-`, `-n`).
 */
export function parseByteRange(header: string | undefined, sizeBytes: number): { start: number; end: number } | 'unsatisfiable' | null {
  if (header === undefined) return null;
  const m = /^bytes=(\d{0,15})-(\d{0,15})$/.exec(header.trim());
  if (!m || (m[1] === '' && m[2] === '')) return null;
  let start: number;
  let end: number;
  if (m[1] === '') {
    const n = Number(m[2]);
    if (n === 0) return 'unsatisfiable';
    start = Math.max(0, sizeBytes - n);
    end = sizeBytes - 1;
  } else {
    start = Number(m[1]);
    end = m[2] === '' ? sizeBytes - 1 : Math.min(Number(m[2]), sizeBytes - 1);
    if (m[2] !== '' && Number(m[2]) < start) return null;
  }
  if (start >= sizeBytes) return 'unsatisfiable';
  return { start, end };
}

/** @param dir outputs.dir/clips (resolved) */
export function clipsRoutes(dir: string): FastifyPluginAsync {
  return async (app) => {
    app.get('/clips/:file', async (req, reply) => {
      const file = (req.params as { file?: unknown }).file;
      const name = typeof file === 'string' ? file : '';
      const shownName = name.length > 80 ? `${name.slice(0, 80)}…` : name;
      if (!CLIP_FILE.test(name)) throw new HttpError('ERR_HTTP_CLIP_NOT_FOUND', { name: JSON.stringify(shownName) });
      const path = join(dir, name);
      let sizeBytes: number;
      try {
        const st = await stat(path);
        if (!st.isFile()) throw new Error('not a file');
        sizeBytes = st.size;
      } catch {
        throw new HttpError('ERR_HTTP_CLIP_NOT_FOUND', { name: JSON.stringify(shownName) });
      }
      void reply.header('content-type', clipContentType(name)).header('accept-ranges', 'bytes').header('cache-control', 'no-cache');
      const range = parseByteRange(req.headers.range, sizeBytes);
      if (range === 'unsatisfiable') {
        return reply.code(416).header('content-range', `bytes */${sizeBytes}`).send();
      }
      if (range) {
        void reply.code(206).header('content-range', `bytes ${range.start}-${range.end}/${sizeBytes}`).header('content-length', String(range.end - range.start + 1));
        return reply.send(createReadStream(path, { start: range.start, end: range.end }));
      }
      void reply.header('content-length', String(sizeBytes));
      return reply.send(createReadStream(path));
    });
  };
}
