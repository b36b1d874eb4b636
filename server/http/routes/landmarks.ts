/**
 * Landmarks (named azimuths, shared/landmarks.ts) over REST:
 *   GET /api/landmarks                         → { landmarks, toleranceDeg, file }
 *   PUT /api/landmarks { landmarks: [...] }    → the list saved (azimuths in [0, 360)), as GET
 * A PUT replaces the whole list and saves it into the array file the server was started with
 * (server/config/array-file-update.ts: the rest of the file is kept, the result validated, the file
 * replaced atomically); an empty list removes the field. The body is closed: another field, a bad
 * entry, a repeated name or too many entries is 400 ERR_HTTP_VALIDATION naming every problem by its
 * path (`landmarks[2].azimuthDeg`); a file that cannot be rewritten is 500 ERR_HTTP_ARRAY_FILE_FAILED
 * (the file is then unchanged). The controller also journals the change and tells the dashboards.
 */
import { basename } from 'node:path';
import type { FastifyPluginAsync } from 'fastify';
import { LANDMARK_TOLERANCE_DEG, validateLandmarks, type Landmark } from '../../../shared/landmarks.ts';
import { updateArrayFile } from '../../config/array-file-update.ts';
import { ConfigError } from '../../config/validate.ts';
import { publicText } from '../../public-text.ts';
import { HttpError } from '../errors.ts';
import { createSerial, type Serial } from '../serial.ts';

export interface LandmarksController {
  list(): Landmark[];
  /** Save `next` (already validated) into the array file; resolves to the list as saved. */
  save(next: Landmark[]): Promise<Landmark[]>;
  /** The array file's name (no folder), for the answer. */
  file(): string;
}

/** Thrown by a controller when the array file cannot be rewritten; `message` is safe to show. */
export class LandmarksSaveError extends Error {
  constructor(message: string) {
    super(message);
    this.name = 'LandmarksSaveError';
  }
}

/**
 * Landmarks kept in the array file at `arrayPath`, starting from `initial` (the file's list as
 * loaded). `onSaved(before, after)` runs after each save that reached the file (journal, dashboards).
 */
export function arrayFileLandmarks(arrayPath: string, initial: readonly Landmark[], onSaved: (before: Landmark[], after: Landmark[]) => void): LandmarksController {
  let current: Landmark[] = initial.map((l) => ({ ...l }));
  return {
    list: () => current.map((l) => ({ ...l })),
    file: () => basename(arrayPath),
    async save(next) {
      let saved: Landmark[];
      try {
        const g = await updateArrayFile(arrayPath, { landmarks: next.length > 0 ? next : undefined });
        saved = g.landmarks ?? [];
      } catch (e) {
        // The file as it is now does not validate, or cannot be read or written: say why, without its folder.
        const text = e instanceof ConfigError ? e.issues.map((i) => i.message.split(arrayPath).join(basename(arrayPath))).join('; ') : publicText(e);
        throw new LandmarksSaveError(text);
      }
      const before = current;
      current = saved;
      onSaved(before, saved.map((l) => ({ ...l })));
      return saved.map((l) => ({ ...l }));
    },
  };
}

/** Check a PUT body: exactly `{ landmarks: [...] }`. @throws HttpError 400 naming every problem */
export function parseLandmarksBody(body: unknown): Landmark[] {
  if (typeof body !== 'object' || body === null || Array.isArray(body)) throw new HttpError('ERR_HTTP_VALIDATION', { detail: '(body): must be a JSON object { "landmarks": [{ "name", "azimuthDeg" }, ...] }' });
  const o = body as Record<string, unknown>;
  const problems: string[] = [];
  for (const k of Object.keys(o)) if (k !== 'landmarks') problems.push(`${k}: unknown field; known: landmarks`);
  if (!('landmarks' in o)) problems.push('landmarks: missing; give the whole list ([] for none)');
  const list = 'landmarks' in o ? validateLandmarks(o.landmarks, 'landmarks', (path, _v, msg) => problems.push(`${path} ${msg}`)) : undefined;
  if (problems.length > 0 || !list) throw new HttpError('ERR_HTTP_VALIDATION', { detail: problems.join('; ') });
  return list;
}

/** @param serial a queue of its own by default: saves run one at a time */
export function landmarksRoutes(c: LandmarksController, serial: Serial = createSerial()): FastifyPluginAsync {
  return async (app) => {
    const answer = (landmarks: Landmark[]) => ({ landmarks, toleranceDeg: LANDMARK_TOLERANCE_DEG, file: c.file() });
    app.get('/landmarks', async () => answer(c.list()));
    app.put('/landmarks', async (req) => {
      const next = parseLandmarksBody(req.body);
      return serial(async () => {
        try {
          return answer(await c.save(next));
        } catch (e) {
          if (e instanceof LandmarksSaveError) throw new HttpError('ERR_HTTP_ARRAY_FILE_FAILED', { detail: e.message });
          throw e;
        }
      });
    });
  };
}
