/**
 * Channel health and masking: `GET /api/channels` → levels (dBFS), peak hold, clipping, dead flag,
 * mask; `PUT /api/channels/mask` { masked: [channel, …] } excludes those channels from processing
 * from the next batch of each worker (no restart); `[]` includes all again.
 */
import type { FastifyPluginAsync } from 'fastify';
import type { ChannelLevel } from '../../engine/channel-meters.ts';
import { HttpError } from '../errors.ts';

export interface ChannelsController {
  channels: number;
  levels(): ChannelLevel[];
  setMasked(masked: number[]): void;
}

export function channelsRoutes(c: ChannelsController): FastifyPluginAsync {
  return async (app) => {
    app.get('/channels', async () => ({ channels: c.levels() }));
    app.put('/channels/mask', async (req) => {
      const b = req.body as Record<string, unknown> | null;
      const bad = (d: string) => new HttpError('ERR_HTTP_VALIDATION', { detail: d });
      if (typeof b !== 'object' || b === null || Array.isArray(b)) throw bad('(body): must be a JSON object { masked: [channel, …] }');
      for (const k of Object.keys(b)) if (k !== 'masked') throw bad(`${k}: unknown field; known: masked`);
      const m = b.masked;
      if (!Array.isArray(m) || !m.every((x) => Number.isInteger(x) && x >= 0 && x < c.channels) || new Set(m).size !== m.length) {
        throw bad(`masked: ${JSON.stringify(m)}: allowed a list of distinct channel numbers 0–${c.channels - 1}`);
      }
      if (m.length >= c.channels) throw bad(`masked: at least one of the ${c.channels} channels must stay in use`);
      c.setMasked(m as number[]);
      return { channels: c.levels() };
    });
  };
}
