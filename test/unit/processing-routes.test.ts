/** `/api/processing` in-process with `app.inject()` against a fake controller. */
import { describe, expect, it } from 'vitest';
import { buildApp } from '../../server/http/app.ts';
import { HTTP_ERRORS } from '../../server/http/errors.ts';
import type { ProcessingController, ProcessingDerived } from '../../server/http/routes/processing.ts';
import { ParamError, type ProcessingParams } from '../../server/engine/params.ts';

const FS = 48000;
const HOP = 256;

const BASE: ProcessingParams = {
  lambda: 0.99,
  loading: { mode: 'relative', ratio: 0.01 },
  bandHz: [300, 6000],
  grid: { azimuthDeg: { startDeg: 0, stopDeg: 180, stepDeg: 1 } },
  methods: ['conventional', 'mvdr'],
  spectrumRateHz: 20,
  normalise: false, fftSize: 512,
};

class FakeController implements ProcessingController {
  params: ProcessingParams = structuredClone(BASE);
  applied: ProcessingParams[] = [];
  resets = 0;
  /** Delay apply() to exercise ordering. */
  delayMs = 0;
  refuse: ParamError | null = null;
  get() {
    return this.params;
  }
  async apply(next: ProcessingParams) {
    if (this.delayMs) await new Promise((r) => setTimeout(r, this.delayMs));
    if (this.refuse) throw this.refuse;
    this.applied.push(next);
    this.params = next;
    return next;
  }
  derived(): ProcessingDerived {
    const g = this.params.grid;
    const n = (r: { startDeg: number; stopDeg: number; stepDeg: number }) => Math.floor((r.stopDeg - r.startDeg) / r.stepDeg + 1e-9) + 1;
    return {
      tauS: HOP / (FS * (1 - this.params.lambda)),
      hopSamples: HOP,
      sampleRateHz: FS,
      directions: n(g.azimuthDeg) * (g.elevationDeg ? n(g.elevationDeg) : 1),
      bins: 61,
    };
  }
  reset() {
    this.resets++;
  }
}

function setup(token: string | null = null) {
  const controller = new FakeController();
  const app = buildApp({ status: () => ({ ok: true }), processing: controller, token });
  return { app, controller };
}

const validation = (message: string) => ({ error: { code: 'ERR_HTTP_VALIDATION', message, statusCode: 400 } });

describe('/api/processing', () => {
  it('the error catalogue has one shape, including the new 401', () => {
    for (const [code, e] of Object.entries(HTTP_ERRORS)) {
      expect(code).toMatch(/^ERR_HTTP_[A-Z_]+$/);
      expect(Object.keys(e).sort()).toEqual(['statusCode', 'template']);
      expect(e.statusCode).toBeGreaterThanOrEqual(400);
    }
    expect(HTTP_ERRORS.ERR_HTTP_UNAUTHORIZED.statusCode).toBe(401);
  });

  it('GET answers the params and the derived figures', async () => {
    const { app } = setup();
    const res = await app.inject({ method: 'GET', url: '/api/processing' });
    expect(res.statusCode).toBe(200);
    expect(res.json()).toEqual({ params: BASE, derived: { tauS: HOP / (FS * (1 - 0.99)), hopSamples: 256, sampleRateHz: 48000, directions: 181, bins: 61 } });
  });

  it('PATCH lambda applies it and answers the applied params with the new τ', async () => {
    const { app, controller } = setup();
    const res = await app.inject({ method: 'PATCH', url: '/api/processing', payload: { lambda: 0.995 } });
    expect(res.statusCode).toBe(200);
    const body = res.json();
    expect(body.params).toEqual({ ...BASE, lambda: 0.995 });
    expect(body.derived.tauS).toBeCloseTo(HOP / (FS * 0.005), 12);
    expect(controller.applied).toEqual([{ ...BASE, lambda: 0.995 }]);
  });

  it('PATCH tauS sets λ = 1 − hop/(fs τ), i.e. τ = hop/(fs(1−λ))', async () => {
    const { app, controller } = setup();
    const res = await app.inject({ method: 'PATCH', url: '/api/processing', payload: { tauS: 0.5 } });
    expect(res.statusCode).toBe(200);
    const lambda = res.json().params.lambda;
    expect(lambda).toBeCloseTo(1 - HOP / (FS * 0.5), 15);
    expect(HOP / (FS * (1 - lambda))).toBeCloseTo(0.5, 12);
    expect(res.json().derived.tauS).toBeCloseTo(0.5, 12);
    expect(controller.params.lambda).toBe(lambda);
    expect(controller.params).not.toHaveProperty('tauS');
  });

  it('PATCH changes only the fields given (grid with elevation, methods)', async () => {
    const { app } = setup();
    const grid = { azimuthDeg: { startDeg: 0, stopDeg: 355, stepDeg: 5 }, elevationDeg: { startDeg: 0, stopDeg: 90, stepDeg: 5 } };
    const res = await app.inject({ method: 'PATCH', url: '/api/processing', payload: { grid, methods: ['mvdr'] } });
    expect(res.statusCode).toBe(200);
    expect(res.json().params).toEqual({ ...BASE, grid, methods: ['mvdr'] });
    expect(res.json().derived.directions).toBe(72 * 19);
  });

  it('PUT replaces the whole object and requires every field', async () => {
    const { app, controller } = setup();
    const next: ProcessingParams = { ...BASE, lambda: 0.9, normalise: true, loading: { mode: 'wng', floorDb: 3 } };
    const ok = await app.inject({ method: 'PUT', url: '/api/processing', payload: next });
    expect(ok.statusCode).toBe(200);
    expect(ok.json().params).toEqual(next);
    for (const field of ['lambda', 'loading', 'bandHz', 'grid', 'methods', 'spectrumRateHz', 'normalise']) {
      const partial: Record<string, unknown> = { ...BASE };
      delete partial[field];
      const res = await app.inject({ method: 'PUT', url: '/api/processing', payload: partial });
      expect(res.statusCode).toBe(400);
      expect(res.json()).toEqual(validation(`${field}: required; PUT replaces every field (use PATCH to change some)`));
    }
    expect(controller.applied).toEqual([next]);
  });

  it('bad values give the exact 400 naming the field, and change nothing', async () => {
    const { app, controller } = setup();
    const cases: [unknown, string][] = [
      [{ lambda: 1 }, 'lambda: 1 out of range; allowed a number in (0, 1)'],
      [{ lambda: '0.9' }, 'lambda: "0.9" out of range; allowed a number in (0, 1)'],
      // The configuration's range (shared/processing-fields.ts), and more than one hop.
      [{ tauS: 0.001 }, 'tauS: 0.001 out of range; allowed 0.01–3600 s'],
      [{ fftSize: 4096, tauS: 0.02 }, `tauS: 0.02 out of range; allowed more than one hop (${Number((2048 / FS).toPrecision(6))} s at FFT size 4096) up to 3600 s`],
      [{ lambda: 0.9, tauS: 1 }, 'tauS: give lambda or tauS, not both'],
      [{ spectrumRateHz: 100 }, 'spectrumRateHz: 100 out of range; allowed 0.5–50'],
      [{ bandHz: [300, 30000] }, 'bandHz: [300, 30000] out of range; allowed 0 ≤ low < high ≤ 24000'],
      [{ methods: [] }, 'methods: []: allowed a non-empty list of mvdr, conventional'],
      [{ normalise: 'yes' }, 'normalise: must be true or false'],
      [{ grid: { azimuthDeg: { startDeg: 0, stopDeg: 180, stepDeg: 0 } } }, 'grid.azimuthDeg.stepDeg: 0 out of range; allowed 0.01–90'],
      [{ loading: { mode: 'relative', ratio: -1 } }, 'loading: ratio must be in 0…1000000, got -1'],
      [[1, 2], '(body): must be object'],
    ];
    for (const [payload, message] of cases) {
      const res = await app.inject({ method: 'PATCH', url: '/api/processing', payload: payload as object });
      expect(res.statusCode, JSON.stringify(payload)).toBe(400);
      expect(res.json()).toEqual(validation(message));
    }
    expect(controller.applied).toEqual([]);
    expect(controller.params).toEqual(BASE);
  });

  it('refuses unknown fields (PATCH and PUT)', async () => {
    const { app } = setup();
    const known = 'lambda, tauS, loading, bandHz, grid, methods, spectrumRateHz, normalise, fftSize';
    const a = await app.inject({ method: 'PATCH', url: '/api/processing', payload: { lamda: 0.9 } });
    expect(a.statusCode).toBe(400);
    expect(a.json()).toEqual(validation(`lamda: unknown field; known: ${known}`));
    const b = await app.inject({ method: 'PUT', url: '/api/processing', payload: { ...BASE, beams: [] } });
    expect(b.json()).toEqual(validation(`beams: unknown field; known: ${known}`));
  });

  it('a refusal from the engine itself is a 400 too', async () => {
    const { app, controller } = setup();
    controller.refuse = new ParamError('grid', 'steering tables would need 2 GB; allowed 512 MB');
    const res = await app.inject({ method: 'PATCH', url: '/api/processing', payload: { lambda: 0.5 } });
    expect(res.statusCode).toBe(400);
    expect(res.json()).toEqual(validation('grid: steering tables would need 2 GB; allowed 512 MB'));
  });

  it('applies concurrent changes one at a time, each on top of the previous', async () => {
    const { app, controller } = setup();
    controller.delayMs = 20;
    const [a, b] = await Promise.all([
      app.inject({ method: 'PATCH', url: '/api/processing', payload: { lambda: 0.5 } }),
      app.inject({ method: 'PATCH', url: '/api/processing', payload: { normalise: true } }),
    ]);
    expect(a.json().params).toMatchObject({ lambda: 0.5, normalise: false });
    expect(b.json().params).toMatchObject({ lambda: 0.5, normalise: true });
    expect(controller.params).toMatchObject({ lambda: 0.5, normalise: true });
  });

  it('POST reset calls the controller and answers 204', async () => {
    const { app, controller } = setup();
    const res = await app.inject({ method: 'POST', url: '/api/processing/reset' });
    expect(res.statusCode).toBe(204);
    expect(res.body).toBe('');
    expect(controller.resets).toBe(1);
  });

  it('with a token: mutating requests need the bearer token (401 without), GET stays open', async () => {
    const { app, controller } = setup('s3cret-token');
    const unauthorized = (method: string, url: string) => ({
      error: { code: 'ERR_HTTP_UNAUTHORIZED', message: `${method} ${url} needs the header Authorization: Bearer <token>`, statusCode: 401 },
    });
    for (const headers of [{}, { authorization: 'Bearer wrong' }, { authorization: 's3cret-token' }, { authorization: 'Basic s3cret-token' }]) {
      const res = await app.inject({ method: 'PATCH', url: '/api/processing', payload: { lambda: 0.5 }, headers });
      expect(res.statusCode).toBe(401);
      expect(res.headers['www-authenticate']).toBe('Bearer realm="nullsteer"');
      expect(res.json()).toEqual(unauthorized('PATCH', '/api/processing'));
    }
    const put = await app.inject({ method: 'PUT', url: '/api/processing', payload: BASE });
    expect(put.json()).toEqual(unauthorized('PUT', '/api/processing'));
    const reset = await app.inject({ method: 'POST', url: '/api/processing/reset' });
    expect(reset.json()).toEqual(unauthorized('POST', '/api/processing/reset'));
    expect(controller.applied).toEqual([]);
    expect(controller.resets).toBe(0);

    expect((await app.inject({ method: 'GET', url: '/api/processing' })).statusCode).toBe(200);
    expect((await app.inject({ method: 'GET', url: '/api/status' })).statusCode).toBe(200);
    const auth = { authorization: 'Bearer s3cret-token' };
    const ok = await app.inject({ method: 'PATCH', url: '/api/processing', payload: { lambda: 0.5 }, headers: auth });
    expect(ok.statusCode).toBe(200);
    expect(ok.json().params.lambda).toBe(0.5);
    expect((await app.inject({ method: 'POST', url: '/api/processing/reset', headers: auth })).statusCode).toBe(204);
    expect(controller.resets).toBe(1);
  });

  it('keeps existing callers working: no processing dep, no routes; no token, no check', async () => {
    const app = buildApp({ status: () => ({}) });
    const res = await app.inject({ method: 'GET', url: '/api/processing' });
    expect(res.statusCode).toBe(404);
    expect(res.json()).toEqual({ error: { code: 'ERR_HTTP_NOT_FOUND', message: 'no route for GET /api/processing', statusCode: 404 } });
    const { app: open } = setup(null);
    expect((await open.inject({ method: 'PATCH', url: '/api/processing', payload: { lambda: 0.5 } })).statusCode).toBe(200);
    expect(() => buildApp({ status: () => ({}), token: '' })).toThrow(RangeError);
  });
});
