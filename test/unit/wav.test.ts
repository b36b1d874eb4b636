import { spawnSync } from 'node:child_process';
import { mkdtempSync, readFileSync, rmSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { afterAll, describe, expect, it } from 'vitest';
import { encodeFrame, FRAME_HEADER_BYTES, SAMPLE_ENCODINGS, type SampleEncoding } from '../../shared/frame.ts';
import { IO_ERRORS, isIoError } from '../../server/io/errors.ts';
import { openRaw } from '../../server/io/raw.ts';
import { encodeWavHeader, openWav, parseWavHeader, writeWavFile } from '../../server/io/wav.ts';

const FIXTURES = fileURLToPath(new URL('../fixtures/wav/', import.meta.url));
const dir = mkdtempSync(join(tmpdir(), 'nullsteer-wav-'));
afterAll(() => rmSync(dir, { recursive: true, force: true }));

const BYTES: Record<SampleEncoding, number> = { int16: 2, int24: 3, int32: 4, float32: 4 };

/** Deterministic samples in about ±1.2, so integer encodings also exercise clipping. */
function signal(frames: number, channels: number): Float32Array {
  const x = new Float32Array(frames * channels);
  for (let i = 0; i < frames; i++) for (let c = 0; c < channels; c++) x[i * channels + c] = 1.2 * Math.sin(0.37 * i + 1.1 * c + 0.2);
  x[0] = 1;
  x[x.length - 1] = -1;
  return x;
}

/** The wire payload shared/frame.ts would produce for these samples (the quantisation reference). */
function wirePayload(samples: Float32Array, channels: number, encoding: SampleEncoding): Uint8Array {
  const n = samples.length / channels;
  const h = { streamId: 1, sequence: 0, firstSample: 0, sampleRateHz: 48000, channels, samplesPerChannel: n, encoding };
  return encodeFrame(h, samples).subarray(FRAME_HEADER_BYTES);
}

type Chunk = [id: string, body: Uint8Array];

/** A RIFF file built by hand, independent of encodeWavHeader; pads odd chunks unless told not to. */
function riff(chunks: Chunk[], opts: { riffId?: string; form?: string; sizes?: Record<string, number> } = {}): Uint8Array {
  const parts: number[] = [];
  const ascii = (s: string) => [...s].forEach((ch) => parts.push(ch.charCodeAt(0)));
  const u32 = (v: number) => parts.push(v & 0xff, (v >>> 8) & 0xff, (v >>> 16) & 0xff, (v >>> 24) & 0xff);
  ascii(opts.form ?? 'WAVE');
  for (const [id, body] of chunks) {
    ascii(id);
    u32(opts.sizes?.[id] ?? body.byteLength);
    parts.push(...body);
    if (body.byteLength & 1) parts.push(0);
  }
  const out = new Uint8Array(8 + parts.length);
  out.set([...(opts.riffId ?? 'RIFF')].map((c) => c.charCodeAt(0)), 0);
  new DataView(out.buffer).setUint32(4, parts.length, true);
  out.set(parts, 8);
  return out;
}

function fmtBody(tag: number, channels: number, rate: number, bits: number, ext?: { subTag?: number; guidTail?: number[]; valid?: number }): Uint8Array {
  const b = new Uint8Array(ext ? 40 : 16);
  const dv = new DataView(b.buffer);
  const align = (channels * bits) / 8;
  dv.setUint16(0, tag, true);
  dv.setUint16(2, channels, true);
  dv.setUint32(4, rate, true);
  dv.setUint32(8, rate * align, true);
  dv.setUint16(12, align, true);
  dv.setUint16(14, bits, true);
  if (ext) {
    dv.setUint16(16, 22, true);
    dv.setUint16(18, ext.valid ?? bits, true);
    dv.setUint32(24, ext.subTag ?? 1, true);
    b.set(ext.guidTail ?? [0x00, 0x00, 0x10, 0x00, 0x80, 0x00, 0x00, 0xaa, 0x00, 0x38, 0x9b, 0x71], 28);
  }
  return b;
}

/** int16 stereo samples 0, 1, 2, … as bytes. */
function pcm16(frames: number, channels = 2): Uint8Array {
  const b = new Uint8Array(frames * channels * 2);
  const dv = new DataView(b.buffer);
  for (let k = 0; k < frames * channels; k++) dv.setInt16(2 * k, k - 7, true);
  return b;
}

function writeTmp(name: string, bytes: Uint8Array): string {
  const p = join(dir, name);
  writeFileSync(p, bytes);
  return p;
}

async function readAll(path: string) {
  const r = await openWav(path);
  try {
    return { info: r.info, bytes: await r.readFrames(0, r.info.frames) };
  } finally {
    await r.close();
  }
}

describe('writeWavFile → openWav round trip', () => {
  const frames = 37; // odd: int24 mono data has odd length and needs the pad byte
  for (const encoding of SAMPLE_ENCODINGS) {
    for (const channels of [1, 2, 6]) {
      it(`${encoding}, ${channels} channel(s)`, async () => {
        const x = signal(frames, channels);
        const path = join(dir, `rt-${encoding}-${channels}.wav`);
        const written = await writeWavFile(path, { sampleRateHz: 48000, channels, encoding, interleaved: x });
        const file = readFileSync(path);
        expect(written.fileBytes).toBe(file.byteLength);
        // Microsoft's rule: EXTENSIBLE for > 2 channels or PCM > 16 bits; plain tags otherwise.
        const plain = channels <= 2 && (encoding === 'int16' || encoding === 'float32');
        const expectTag = plain ? (encoding === 'float32' ? 3 : 1) : 0xfffe;
        expect(file.readUInt16LE(20)).toBe(expectTag);
        if (encoding === 'int16' && channels <= 2) expect(file.indexOf('data')).toBe(36); // the canonical 44-byte header
        const { info, bytes } = await readAll(path);
        expect(info).toMatchObject({
          container: 'wav',
          sampleRateHz: 48000,
          channels,
          encoding,
          bitsPerSample: 8 * BYTES[encoding],
          formatTag: expectTag,
          frames,
          truncated: false,
          partialFrameBytes: 0,
          dataBytes: frames * channels * BYTES[encoding],
        });
        expect(bytes).toEqual(wirePayload(x, channels, encoding));
        expect(file.byteLength % 2).toBe(0);
        expect(file.readUInt32LE(4)).toBe(file.byteLength - 8);
      });
    }
  }

  it('passes byte input through unchanged', async () => {
    const data = pcm16(5, 3);
    const path = join(dir, 'bytes.wav');
    await writeWavFile(path, { sampleRateHz: 8000, channels: 3, encoding: 'int16', interleaved: data });
    const { info, bytes } = await readAll(path);
    expect(info.formatTag).toBe(0xfffe);
    expect(bytes).toEqual(data);
  });

  it('rejects data that is not whole frames', async () => {
    await expect(writeWavFile(join(dir, 'x.wav'), { sampleRateHz: 8000, channels: 2, encoding: 'int16', interleaved: new Float32Array(3) })).rejects.toMatchObject({
      code: 'ERR_IO_BAD_SAMPLES',
    });
  });
});

describe('chunked reading', () => {
  it('reads any split of the file into the same bytes, and bounds-checks', async () => {
    const x = signal(101, 3);
    const path = join(dir, 'chunks.wav');
    await writeWavFile(path, { sampleRateHz: 48000, channels: 3, encoding: 'int24', interleaved: x });
    const whole = wirePayload(x, 3, 'int24');
    const r = await openWav(path);
    try {
      const parts: number[] = [];
      for await (const c of r.chunks(7)) parts.push(...c);
      expect(Uint8Array.from(parts)).toEqual(whole);
      const out = new Uint8Array(10 * 9);
      const view = await r.readFrames(95, 10, out);
      expect(view.buffer).toBe(out.buffer);
      expect(view.byteLength).toBe(6 * 9); // only 6 frames remain
      expect(view).toEqual(whole.subarray(95 * 9));
      expect(await r.readFrames(101, 5)).toHaveLength(0);
      await expect(r.readFrames(102, 1)).rejects.toMatchObject({ code: 'ERR_IO_FRAME_RANGE', name: 'RangeError' });
      await expect(r.readFrames(0, -1)).rejects.toMatchObject({ code: 'ERR_IO_FRAME_RANGE' });
      await expect(r.readFrames(0, 10, new Uint8Array(5))).rejects.toMatchObject({ code: 'ERR_IO_FRAME_RANGE' });
    } finally {
      await r.close();
    }
    await expect(r.readFrames(0, 1)).rejects.toMatchObject({ code: 'ERR_IO_CLOSED' });
    await r.close(); // twice is harmless
  });
});

describe('chunk walking', () => {
  const data = pcm16(6);
  const fmt = fmtBody(1, 2, 8000, 16);

  it('skips unknown chunks before and after fmt', async () => {
    const bytes = riff([
      ['JUNK', new Uint8Array(28)],
      ['fmt ', fmt],
      ['LIST', new TextEncoder().encode('INFOISFT\x04\x00\x00\x00test')],
      ['bext', new Uint8Array(602)],
      ['data', data],
      ['id3 ', new Uint8Array(10)],
    ]);
    const info = await parseWavHeader(bytes);
    expect(info.dataOffset).toBe(12 + (8 + 28) + (8 + 16) + (8 + 16) + (8 + 602) + 8);
    expect(info.frames).toBe(6);
    expect(bytes.subarray(info.dataOffset, info.dataOffset + info.dataBytes)).toEqual(data);
  });

  it('honours the pad byte after odd-sized chunks', async () => {
    const bytes = riff([['fmt ', fmt], ['odd1', new Uint8Array([1, 2, 3])], ['odd2', new Uint8Array([9])], ['data', data]]);
    const path = writeTmp('odd.wav', bytes);
    const { info, bytes: got } = await readAll(path);
    expect(info.dataOffset).toBe(12 + (8 + 16) + (8 + 3 + 1) + (8 + 1 + 1) + 8);
    expect(got).toEqual(data);
  });

  it('finds fmt after a sized data chunk', async () => {
    const info = await parseWavHeader(riff([['data', data], ['fmt ', fmt]]));
    expect(info).toMatchObject({ frames: 6, dataOffset: 20, channels: 2 });
  });

  it('reads a data chunk larger than the file to the last whole frame', async () => {
    const cut = riff([['fmt ', fmt], ['data', data]], { sizes: { data: 1_000_000 } }).subarray(0, 44 + 4 * 4 + 3);
    const info = await parseWavHeader(cut);
    expect(info).toMatchObject({ frames: 4, truncated: true, partialFrameBytes: 3, declaredDataBytes: 1_000_000, dataBytes: 16 });
  });

  it('treats an unfinalised data size (0xFFFFFFFF, or 0 with data after it) as running to the end', async () => {
    for (const size of [0xffffffff, 0]) {
      const bytes = riff([['fmt ', fmt], ['data', data]], { sizes: { data: size } });
      const path = writeTmp(`unfinalised-${size}.wav`, bytes);
      const { info, bytes: got } = await readAll(path);
      expect(info).toMatchObject({ frames: 6, truncated: true, declaredDataBytes: size });
      expect(got).toEqual(data);
    }
    const empty = await parseWavHeader(riff([['fmt ', fmt], ['data', new Uint8Array(0)]]));
    expect(empty).toMatchObject({ frames: 0, truncated: false });
  });

  it('parses a header prefix given the full file size', async () => {
    const bytes = riff([['fmt ', fmt], ['data', data]]);
    const info = await parseWavHeader(bytes.subarray(0, 44), { fileBytes: bytes.byteLength });
    expect(info).toMatchObject({ frames: 6, truncated: false, dataOffset: 44 });
  });

  it('reads RF64 sizes from the ds64 chunk (EBU Tech 3306)', async () => {
    const ds64 = new Uint8Array(28);
    const dv = new DataView(ds64.buffer);
    dv.setBigUint64(8, BigInt(data.byteLength), true); // dataSize
    dv.setBigUint64(16, 6n, true); // sampleCount
    const bytes = riff([['ds64', ds64], ['fmt ', fmt], ['data', data], ['LIST', new Uint8Array(4)]], { riffId: 'RF64', sizes: { data: 0xffffffff } });
    new DataView(bytes.buffer).setUint32(4, 0xffffffff, true);
    const { info, bytes: got } = await readAll(writeTmp('rf64.wav', bytes));
    expect(info).toMatchObject({ container: 'rf64', frames: 6, truncated: false, declaredDataBytes: data.byteLength });
    expect(got).toEqual(data);
  });
});

describe('rejections', () => {
  const data = pcm16(2);
  const cases: [string, Uint8Array, string, RegExp][] = [
    ['8-bit PCM', riff([['fmt ', fmtBody(1, 1, 8000, 8)], ['data', data]]), 'ERR_WAV_UNSUPPORTED_FORMAT', /0x0001 \(PCM\) with 8 bits per sample \(8-bit unsigned\)/],
    ['20-bit PCM', riff([['fmt ', fmtBody(1, 1, 8000, 20)], ['data', data]]), 'ERR_WAV_UNSUPPORTED_FORMAT', /with 20 bits per sample/],
    ['64-bit float', riff([['fmt ', fmtBody(3, 1, 8000, 64)], ['data', data]]), 'ERR_WAV_UNSUPPORTED_FORMAT', /0x0003 \(IEEE float\) with 64 bits/],
    ['A-law', riff([['fmt ', fmtBody(6, 1, 8000, 8)], ['data', data]]), 'ERR_WAV_UNSUPPORTED_FORMAT', /format code 0x0006 \(A-law\)/],
    ['MS ADPCM', riff([['fmt ', fmtBody(2, 1, 8000, 4)], ['data', data]]), 'ERR_WAV_UNSUPPORTED_FORMAT', /0x0002 \(Microsoft ADPCM\)/],
    ['EXTENSIBLE µ-law', riff([['fmt ', fmtBody(0xfffe, 1, 8000, 8, { subTag: 7 })], ['data', data]]), 'ERR_WAV_UNSUPPORTED_FORMAT', /0x0007 \(µ-law\) in WAVE_FORMAT_EXTENSIBLE/],
    ['EXTENSIBLE 64-bit float', riff([['fmt ', fmtBody(0xfffe, 1, 8000, 64, { subTag: 3 })], ['data', data]]), 'ERR_WAV_UNSUPPORTED_FORMAT', /IEEE float\) in WAVE_FORMAT_EXTENSIBLE with 64 bits/],
    ['EXTENSIBLE foreign GUID', riff([['fmt ', fmtBody(0xfffe, 2, 8000, 16, { guidTail: new Array(12).fill(0x11) })], ['data', data]]), 'ERR_WAV_UNSUPPORTED_FORMAT', /subformat GUID bytes 01000000(11){12}/],
    ['short EXTENSIBLE fmt', riff([['fmt ', fmtBody(0xfffe, 2, 8000, 16)], ['data', data]]), 'ERR_WAV_MALFORMED', /40 needed/],
    ['short fmt', riff([['fmt ', new Uint8Array(14)], ['data', data]]), 'ERR_WAV_MALFORMED', /fmt chunk of 14 bytes/],
    ['wrong block align', riff([['fmt ', (() => { const f = fmtBody(1, 2, 8000, 16); f[12] = 3; return f; })()], ['data', data]]), 'ERR_WAV_MALFORMED', /nBlockAlign 3/],
    ['not RIFF', new TextEncoder().encode('OggS\0\0\0\0WAVEfmt '), 'ERR_WAV_NOT_WAVE', /starts with 'OggS'/],
    ['not WAVE', riff([], { form: 'AVI ' }), 'ERR_WAV_NOT_WAVE', /form type 'AVI '/],
    ['too short', new Uint8Array(5), 'ERR_WAV_NOT_WAVE', /5 bytes/],
    ['no fmt', riff([['data', data]]), 'ERR_WAV_NO_FMT', /no fmt chunk/],
    ['no data', riff([['fmt ', fmtBody(1, 2, 8000, 16)]]), 'ERR_WAV_NO_DATA', /no data chunk/],
  ];
  for (const [name, bytes, code, message] of cases) {
    it(name, async () => {
      const err = await parseWavHeader(bytes).then(
        () => null,
        (e: unknown) => e,
      );
      expect(isIoError(err)).toBe(true);
      expect(err).toBeInstanceOf(IO_ERRORS[code as keyof typeof IO_ERRORS].errorClass);
      expect(err).toMatchObject({ code });
      expect((err as Error).message).toMatch(message);
      expect((err as Error).message.startsWith(IO_ERRORS[code as keyof typeof IO_ERRORS].message)).toBe(true);
    });
  }

  it('closes the file when openWav rejects', async () => {
    await expect(openWav(writeTmp('bad.wav', cases[0][1]))).rejects.toMatchObject({ code: 'ERR_WAV_UNSUPPORTED_FORMAT' });
  });

  it('refuses to write more than a RIFF file can describe', () => {
    expect(() => encodeWavHeader({ sampleRateHz: 48000, channels: 8, encoding: 'int32', frames: 2 ** 27 })).toThrow(
      expect.objectContaining({ code: 'ERR_WAV_TOO_LARGE' }),
    );
    expect(() => encodeWavHeader({ sampleRateHz: 0, channels: 2, encoding: 'int16', frames: 1 })).toThrow(/sampleRateHz 0/);
  });

  it('has a catalogue of ERR_ codes, each with a class and a message', () => {
    for (const [code, spec] of Object.entries(IO_ERRORS)) {
      expect(code).toMatch(/^ERR_(WAV|IO)_[A-Z0-9_]+$/);
      expect([Error, RangeError, TypeError]).toContain(spec.errorClass);
      expect(spec.message.length).toBeGreaterThan(5);
    }
  });
});

describe('reference files written by Python (test/fixtures/wav)', () => {
  const expected = JSON.parse(readFileSync(join(FIXTURES, 'expected.json'), 'utf8')) as {
    files: Record<string, { sampleRateHz: number; channels: number; encoding: SampleEncoding; bitsPerSample: number; formatTag: number; channelMask?: number; frames: number; samples: number[][] }>;
  };

  /** Decode little-endian samples by hand (not with the project's decoder). */
  function decodeRaw(bytes: Uint8Array, encoding: SampleEncoding): number[] {
    const dv = new DataView(bytes.buffer, bytes.byteOffset, bytes.byteLength);
    const out: number[] = [];
    for (let p = 0; p < bytes.byteLength; p += BYTES[encoding]) {
      if (encoding === 'int16') out.push(dv.getInt16(p, true));
      else if (encoding === 'int32') out.push(dv.getInt32(p, true));
      else if (encoding === 'float32') out.push(dv.getFloat32(p, true));
      else out.push(((bytes[p] | (bytes[p + 1] << 8) | (bytes[p + 2] << 16)) << 8) >> 8);
    }
    return out;
  }

  for (const [name, spec] of Object.entries(expected.files)) {
    it(`${name} holds exactly the values the script wrote`, async () => {
      const { info, bytes } = await readAll(join(FIXTURES, name));
      expect(info).toMatchObject({
        sampleRateHz: spec.sampleRateHz,
        channels: spec.channels,
        encoding: spec.encoding,
        bitsPerSample: spec.bitsPerSample,
        formatTag: spec.formatTag,
        frames: spec.frames,
        truncated: false,
        channelMask: spec.channelMask ?? 0,
      });
      expect(decodeRaw(bytes, spec.encoding)).toEqual(spec.samples.flat());
    });
  }

  const python = spawnSync('python3', ['--version']).status === 0;
  it.skipIf(!python)('regenerating the fixtures gives no difference', () => {
    const out = mkdtempSync(join(dir, 'regen-'));
    const run = spawnSync('python3', [join(FIXTURES, 'make_wav_fixtures.py'), out], { encoding: 'utf8' });
    expect(run.status, run.stderr).toBe(0);
    for (const f of [...Object.keys(expected.files), 'expected.json']) {
      expect(readFileSync(join(out, f)).equals(readFileSync(join(FIXTURES, f))), f).toBe(true);
    }
  });
});

describe('openRaw', () => {
  it('reads whole frames and reports a partial last frame', async () => {
    const data = pcm16(5, 3);
    const path = writeTmp('raw.bin', Uint8Array.from([...data, 1, 2, 3, 4]));
    const r = await openRaw(path, { channels: 3, sampleRateHz: 16000, encoding: 'int16' });
    try {
      expect(r.info).toMatchObject({ container: 'raw', frames: 5, dataOffset: 0, truncated: true, partialFrameBytes: 4, bitsPerSample: 16 });
      expect(await r.readFrames(0, 100)).toEqual(data);
    } finally {
      await r.close();
    }
    const skip = await openRaw(path, { channels: 3, sampleRateHz: 16000, encoding: 'int16', offsetBytes: 6 });
    try {
      expect(skip.info).toMatchObject({ frames: 4, partialFrameBytes: 4, dataOffset: 6 });
      expect(await skip.readFrames(0, 1)).toEqual(data.subarray(6, 12));
    } finally {
      await skip.close();
    }
  });

  it('rejects an impossible format naming the field', async () => {
    const path = writeTmp('raw2.bin', new Uint8Array(12));
    await expect(openRaw(path, { channels: 0, sampleRateHz: 16000, encoding: 'int16' })).rejects.toThrow(/channels 0/);
    await expect(openRaw(path, { channels: 1, sampleRateHz: 1.5, encoding: 'int16' })).rejects.toThrow(/sampleRateHz 1.5/);
    await expect(openRaw(path, { channels: 1, sampleRateHz: 8000, encoding: 'int8' as SampleEncoding })).rejects.toThrow(/encoding int8/);
  });
});
