/**
 * STFT and WOLA checks against independent references: a direct O(N²) DFT written here, the
 * constant-overlap-add identity of the periodic Hann window, and perfect reconstruction by weighted
 * overlap-add with a square-root Hann window at hop N/2 (J. B. Allen & L. R. Rabiner, "A unified
 * approach to short-time Fourier analysis and synthesis", Proc. IEEE 65(11), 1977).
 */
import { describe, expect, it } from 'vitest';
import { MultiChannelStft, Stft, WolaSynthesizer, sqrtHannWindow, wolaLatencySamples } from '../../server/dsp/stft.ts';

/** Small seeded PRNG (mulberry32) so failures reproduce; uniform in [−1, 1). */
function prng(seed: number): () => number {
  let a = seed >>> 0;
  return () => {
    a = (a + 0x6d2b79f5) >>> 0;
    let t = a;
    t = Math.imul(t ^ (t >>> 15), t | 1);
    t ^= t + Math.imul(t ^ (t >>> 7), t | 61);
    return (((t ^ (t >>> 14)) >>> 0) / 4294967296) * 2 - 1;
  };
}

/** Direct DFT of w[n]·x[n], bins 0…N/2, with exact twiddle indices (k·n mod N). */
function directDft(x: Float64Array, n: number): Float64Array {
  const cosT = new Float64Array(n);
  const sinT = new Float64Array(n);
  for (let j = 0; j < n; j++) {
    cosT[j] = Math.cos((2 * Math.PI * j) / n);
    sinT[j] = Math.sin((2 * Math.PI * j) / n);
  }
  const xw = new Float64Array(n);
  for (let i = 0; i < n; i++) xw[i] = Math.sin((Math.PI * i) / n) * x[i];
  const bins = n / 2 + 1;
  const out = new Float64Array(2 * bins);
  for (let k = 0; k < bins; k++) {
    let re = 0;
    let im = 0;
    for (let i = 0; i < n; i++) {
      const j = (k * i) % n;
      re += xw[i] * cosT[j];
      im -= xw[i] * sinT[j];
    }
    out[2 * k] = re;
    out[2 * k + 1] = im;
  }
  return out;
}

function maxRelativeError(a: Float64Array, ref: Float64Array): number {
  let errMax = 0;
  let refMax = 0;
  for (let i = 0; i < ref.length; i += 2) {
    errMax = Math.max(errMax, Math.hypot(a[i] - ref[i], a[i + 1] - ref[i + 1]));
    refMax = Math.max(refMax, Math.hypot(ref[i], ref[i + 1]));
  }
  return errMax / refMax;
}

const SIZES = [256, 512, 1024, 4096];
const SIGNALS: Record<string, (n: number) => Float64Array> = {
  random: (n) => {
    const r = prng(n);
    return Float64Array.from({ length: n }, () => r());
  },
  impulse: (n) => {
    const x = new Float64Array(n);
    x[Math.floor(n / 3)] = 1;
    return x;
  },
  tone: (n) => Float64Array.from({ length: n }, (_, i) => Math.cos((2 * Math.PI * 37.3 * i) / n + 0.4)),
};

describe('Stft.analyze against a direct DFT', () => {
  for (const n of SIZES) {
    for (const [name, make] of Object.entries(SIGNALS)) {
      it(`N = ${n}, ${name}: max relative error < 1e-12`, () => {
        const x = make(n);
        const before = Float64Array.from(x);
        const stft = new Stft(n);
        const out = new Float64Array(2 * stft.bins);
        stft.analyze(out, x);
        const err = maxRelativeError(out, directDft(x, n));
        expect(err).toBeLessThan(1e-12);
        expect(x).toEqual(before);
      });
    }
  }

  it('reads a frame at an offset, and from Float32Array input', () => {
    const n = 512;
    const r = prng(7);
    const long = new Float32Array(3 * n).map(() => r());
    const frame = Float64Array.from(long.subarray(100, 100 + n));
    const stft = new Stft(n);
    const a = new Float64Array(2 * stft.bins);
    stft.analyze(a, long, 100);
    expect(maxRelativeError(a, directDft(frame, n))).toBeLessThan(1e-12);
    expect(() => stft.analyze(a, long, 2 * n + 1)).toThrow(RangeError);
  });

  it('exposes the size, hop, bins and bin frequencies; refuses other sizes', () => {
    const stft = new Stft(512);
    expect([stft.fftSize, stft.hop, stft.bins]).toEqual([512, 256, 257]);
    expect(stft.binFrequencyHz(64, 48000)).toBe(6000);
    // DESIGN.md's standard band: 300–6000 Hz at 48 kHz, N = 512 → 61 bins.
    expect(stft.bandBins(300, 6000, 48000)).toEqual({ startBin: 4, stopBin: 64, count: 61 });
    for (const bad of [128, 300, 8192, 512.5]) expect(() => new Stft(bad)).toThrow(RangeError);
  });
});

describe('square-root Hann window', () => {
  for (const n of SIZES) {
    it(`N = ${n}: w² is the periodic Hann and sums to 1 over shifts by N/2 (COLA)`, () => {
      const w = sqrtHannWindow(n);
      let worst = 0;
      for (let i = 0; i < n / 2; i++) worst = Math.max(worst, Math.abs(w[i] ** 2 + w[i + n / 2] ** 2 - 1));
      expect(worst).toBeLessThanOrEqual(1e-15);
      for (let i = 0; i < n; i++) expect(w[i] ** 2).toBeCloseTo(0.5 * (1 - Math.cos((2 * Math.PI * i) / n)), 15);
    });
  }
});

/**
 * Push `x` (planar, `channels` × `length`) through MultiChannelStft in blocks cycling through
 * `blockSizes`, resynthesise every channel with its own WolaSynthesizer, and return the outputs and
 * the hop start indices seen.
 */
function roundTrip(x: Float32Array, channels: number, length: number, n: number, blockSizes: number[], first = 0) {
  const analyser = new MultiChannelStft(channels, n);
  const synths = Array.from({ length: channels }, () => new WolaSynthesizer(n));
  const bins = analyser.bins;
  const spectrum = new Float64Array(2 * bins);
  const hopOut = new Float64Array(analyser.hop);
  const outputs = Array.from({ length: channels }, () => [] as number[]);
  const hopStarts: number[] = [];
  const onHop = (snap: Float64Array, hopStartSample: number) => {
    hopStarts.push(hopStartSample);
    for (let c = 0; c < channels; c++) {
      for (let k = 0; k < bins; k++) {
        spectrum[2 * k] = snap[(k * channels + c) * 2];
        spectrum[2 * k + 1] = snap[(k * channels + c) * 2 + 1];
      }
      const before = Float64Array.from(spectrum);
      synths[c].push(spectrum, hopOut);
      expect(spectrum).toEqual(before);
      for (const v of hopOut) outputs[c].push(v);
    }
  };
  let pos = 0;
  for (let b = 0; pos < length; b++) {
    const frames = Math.min(blockSizes[b % blockSizes.length], length - pos);
    const block = new Float32Array(channels * frames);
    for (let c = 0; c < channels; c++) block.set(x.subarray(c * length + pos, c * length + pos + frames), c * frames);
    const before = Float32Array.from(block);
    analyser.push(block, frames, first + pos, onHop);
    expect(block).toEqual(before);
    pos += frames;
  }
  return { outputs, hopStarts, analyser, latency: synths[0].latencySamples };
}

/** Reconstruction error in dB relative to the signal, comparing out[i] with x[i − latency], i ≥ N. */
function reconstructionErrorDb(out: number[], x: Float32Array, offset: number, n: number, latency: number): number {
  let e2 = 0;
  let s2 = 0;
  for (let i = n; i < out.length; i++) {
    const ref = x[offset + i - latency];
    e2 += (out[i] - ref) ** 2;
    s2 += ref ** 2;
  }
  return 10 * Math.log10(e2 / s2);
}

describe('MultiChannelStft → WolaSynthesizer round trip', () => {
  const length = 20_000;
  for (const n of [256, 512, 1024, 4096]) {
    for (const blockSizes of [[1], [100], [n / 2], [n / 2 + 1], [3 * n + 5]]) {
      it(`N = ${n}, blocks of ${blockSizes[0]}: error < −120 dB after the ${n / 2}-sample latency`, () => {
        const r = prng(n + blockSizes[0]);
        const x = new Float32Array(length).map(() => r());
        const { outputs, hopStarts, latency } = roundTrip(x, 1, length, n, blockSizes, 1000);
        expect(latency).toBe(n / 2);
        expect(wolaLatencySamples(n)).toBe(n / 2);
        // Primed with N − hop zeros: one hop out per hop in, the first frame starting N/2 early.
        expect(hopStarts.length).toBe(Math.floor(length / (n / 2)));
        hopStarts.forEach((s, j) => expect(s).toBe(1000 - n / 2 + j * (n / 2)));
        expect(reconstructionErrorDb(outputs[0], x, 0, n, latency)).toBeLessThan(-120);
      });
    }
  }

  it('3 channels in odd-size blocks (37, 500, 1000): each channel reconstructs, snapshots match Stft.analyze', () => {
    const n = 512;
    const channels = 3;
    const r = prng(99);
    const x = new Float32Array(channels * length).map(() => r());
    const { outputs, latency } = roundTrip(x, channels, length, n, [37, 500, 1000]);
    for (let c = 0; c < channels; c++) {
      const err = reconstructionErrorDb(outputs[c], x, c * length, n, latency);
      expect(err).toBeLessThan(-120);
    }

    // Layout check: snapshot[(k·M + m)·2] is channel m's Stft.analyze of its frame.
    const analyser = new MultiChannelStft(channels, n);
    const stft = new Stft(n);
    const ref = new Float64Array(2 * stft.bins);
    const block = new Float32Array(channels * 1500);
    for (let c = 0; c < channels; c++) block.set(x.subarray(c * length, c * length + 1500), c * 1500);
    let checked = 0;
    analyser.push(block, 1500, 0, (snap, start) => {
      if (start < 0) return;
      for (let c = 0; c < channels; c++) {
        stft.analyze(ref, x, c * length + start);
        for (let k = 0; k < stft.bins; k++) {
          expect(snap[(k * channels + c) * 2]).toBe(ref[2 * k]);
          expect(snap[(k * channels + c) * 2 + 1]).toBe(ref[2 * k + 1]);
        }
      }
      checked++;
    });
    expect(checked).toBe(4); // frames starting at 0, 256, 512, 768 (the one at −256 is skipped)
  });

  it('refuses a discontinuous stream until reset(), and validates block sizes', () => {
    const analyser = new MultiChannelStft(2, 256);
    const block = new Float32Array(2 * 100);
    const none = () => {};
    analyser.push(block, 100, 5000, none);
    expect(analyser.expectedNextSample).toBe(5100);
    expect(() => analyser.push(block, 100, 5200, none)).toThrow(/continue the stream at 5100/);
    expect(() => analyser.push(block, 101, 5100, none)).toThrow(RangeError);
    analyser.reset();
    expect(analyser.expectedNextSample).toBeNull();
    const starts: number[] = [];
    analyser.push(new Float32Array(2 * 300), 300, 0, (_s, start) => starts.push(start));
    expect(starts).toEqual([-128, 0]);
    expect(() => new MultiChannelStft(0, 256)).toThrow(RangeError);
  });
});

describe('MultiChannelStft on the WebAssembly SIMD transform (dsp/fast/wasm-fft.ts)', () => {
  /** Each hop's snapshot of an analyser fed `block` (planar, `frames` per channel) in pieces. */
  function snapshots(a: MultiChannelStft, block: Float32Array, frames: number, pieces: number[], accelerateAfter = -1): Promise<{ start: number; snap: Float64Array }[]> {
    const out: { start: number; snap: Float64Array }[] = [];
    return (async () => {
      let at = 0;
      for (let i = 0; at < frames; i++) {
        const k = Math.min(pieces[i % pieces.length], frames - at);
        a.push(block, k, at, (snap, start) => out.push({ start, snap: snap.slice() }), frames, at);
        at += k;
        if (i === accelerateAfter) expect(await a.accelerate()).toBe(true);
      }
      return out;
    })();
  }

  for (const n of SIZES) {
    it(`N = ${n}, 5 channels (one lane left over): every channel's bins match a direct DFT to 1e-12`, async () => {
      const m = 5;
      const frames = 3 * n;
      const r = prng(n + 5);
      const block = new Float32Array(m * frames).map(() => r());
      const a = new MultiChannelStft(m, n);
      expect(await a.accelerate()).toBe(true);
      expect(a.accelerated).toBe(true);
      const snaps = await snapshots(a, block, frames, [n / 2 + 3, 17]);
      let worst = 0;
      let checked = 0;
      for (const { start, snap } of snaps) {
        if (start < 0) continue;
        for (let c = 0; c < m; c++) {
          const x = Float64Array.from(block.subarray(c * frames + start, c * frames + start + n));
          const ref = directDft(x, n);
          const got = new Float64Array(ref.length);
          for (let k = 0; k < n / 2 + 1; k++) {
            got[2 * k] = snap[(k * m + c) * 2];
            got[2 * k + 1] = snap[(k * m + c) * 2 + 1];
          }
          worst = Math.max(worst, maxRelativeError(got, ref));
          checked++;
        }
      }
      expect(checked).toBe(5 * 5); // frames at 0, N/2, N, 3N/2, 2N per channel
      expect(worst).toBeLessThan(1e-12);
    });
  }

  it('gives the fft.js path\'s snapshots when switched mid-stream, through a reset, in odd blocks', async () => {
    const n = 512;
    const m = 7;
    const frames = 6000;
    const r = prng(3);
    const block = new Float32Array(m * frames).map(() => r());
    const plain = await snapshots(new MultiChannelStft(m, n), block, frames, [37, 500, 1000]);
    const fast = new MultiChannelStft(m, n);
    const got = await snapshots(fast, block, frames, [37, 500, 1000], 1); // after 537 frames
    expect(got.map((s) => s.start)).toEqual(plain.map((s) => s.start));
    let worst = 0;
    got.forEach((s, i) => (worst = Math.max(worst, maxRelativeError(s.snap, plain[i].snap))));
    expect(worst).toBeLessThan(1e-12);
    fast.reset();
    const again = await snapshots(fast, block, frames, [1000]);
    const plainAgain = await snapshots(new MultiChannelStft(m, n), block, frames, [1000]);
    again.forEach((s, i) => expect(maxRelativeError(s.snap, plainAgain[i].snap)).toBeLessThan(1e-12));
  });

  it('writes only the requested bins into an output ring, the same values as the full snapshot', async () => {
    const n = 256;
    const m = 4;
    const frames = 1024;
    const r = prng(11);
    const block = new Float32Array(m * frames).map(() => r());
    const full = await snapshots(new MultiChannelStft(m, n), block, frames, [frames]);
    const a = new MultiChannelStft(m, n);
    await a.accelerate();
    const slot = 2 * m * a.bins;
    const ring = new Float64Array(2 * slot).fill(-7);
    let hop = 0;
    a.setOutput(ring, () => (hop++ % 2) * slot, { startBin: 10, stopBin: 29, count: 20 });
    const seen: Float64Array[] = [];
    a.push(block, frames, 0, (out, _start) => seen.push(out.slice(((hop - 1) % 2) * slot, ((hop - 1) % 2) * slot + slot)));
    expect(seen).toHaveLength(full.length);
    seen.forEach((s, i) => {
      for (let k = 0; k < a.bins; k++) {
        for (let q = 0; q < 2 * m; q++) {
          const v = s[2 * m * k + q];
          if (k >= 10 && k < 30) expect(v).toBeCloseTo(full[i].snap[2 * m * k + q], 12);
          else expect(v).toBe(-7);
        }
      }
    });
    expect(() => a.setOutput(ring, () => 0, { startBin: 120, stopBin: 129, count: 10 })).toThrow(/outside 0…128/);
  });

  it('pushes a run of frames from inside a longer planar block without a copy', () => {
    const n = 256;
    const m = 3;
    const frames = 1000;
    const r = prng(21);
    const block = new Float32Array(m * frames).map(() => r());
    const sub = new Float32Array(m * 600);
    for (let c = 0; c < m; c++) sub.set(block.subarray(c * frames + 300, c * frames + 900), c * 600);
    const a: Float64Array[] = [];
    const b: Float64Array[] = [];
    new MultiChannelStft(m, n).push(sub, 600, 300, (s) => a.push(s.slice()));
    new MultiChannelStft(m, n).push(block, 600, 300, (s) => b.push(s.slice()), frames, 300);
    expect(b).toEqual(a);
    expect(() => new MultiChannelStft(m, n).push(block, 600, 0, () => {}, frames, 500)).toThrow(/must fit in channelStride/);
  });
});
