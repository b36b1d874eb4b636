/**
 * A direct listener of the beam-audio WebSocket for tests: keeps one channel's samples by stream
 * sample index (decoded with shared/frame.ts, independently of shared/beam-listen.ts), bounded to
 * `maxSamples` from the first frame.
 */
import WebSocket from 'ws';
import { decodeFrame, decodeSamples } from '../../shared/frame.ts';

export class BeamSubscriber {
  readonly ws: WebSocket;
  base = -1;
  readonly samples: Float32Array;
  readonly have: Uint8Array;
  frames = 0;
  /** Close code once closed (1013: the server found this listener too slow), else null. */
  closeCode: number | null = null;
  /** Messages that were not frames of this channel, or held NaN/∞. */
  refused = 0;
  messages = 0;
  /** One past the highest sample index received. */
  end = -1;

  constructor(url: string, readonly channel: number, maxSamples = 48000 * 60) {
    this.samples = new Float32Array(maxSamples);
    this.have = new Uint8Array(maxSamples);
    this.ws = new WebSocket(url);
    this.ws.on('error', () => undefined);
    this.ws.on('close', (code) => (this.closeCode = code));
    this.ws.on('message', (data: Buffer, isBinary: boolean) => {
      this.messages++;
      if (!isBinary) return;
      const r = decodeFrame(new Uint8Array(data.buffer, data.byteOffset, data.byteLength));
      if (!r.ok || r.frame.channels <= channel) {
        this.refused++;
        return;
      }
      const f = r.frame;
      const planar = new Float32Array(f.channels * f.samplesPerChannel);
      if (!decodeSamples(f, planar)) {
        this.refused++;
        return;
      }
      if (this.base < 0) this.base = f.firstSample;
      for (let i = 0; i < f.samplesPerChannel; i++) {
        const k = f.firstSample + i - this.base;
        if (k < 0 || k >= this.samples.length) continue;
        this.samples[k] = planar[channel * f.samplesPerChannel + i];
        this.have[k] = 1;
      }
      this.frames++;
      this.end = Math.max(this.end, f.firstSample + f.samplesPerChannel);
    });
  }

  opened(): Promise<void> {
    return new Promise((resolve, reject) => {
      if (this.ws.readyState === WebSocket.OPEN) return resolve();
      this.ws.once('open', () => resolve());
      this.ws.once('error', reject);
    });
  }

  /**
   * What the server sent for [first, first + n), once the stream has passed first + n: the values
   * and whether each index was sent at all (a jump in the stream leaves indices unsent); null
   * before that, or when the range starts before this listener's first frame.
   */
  window(first: number, n: number): { values: Float32Array; sent: Uint8Array } | null {
    const k = first - this.base;
    if (this.base < 0 || k < 0 || k + n > this.samples.length || first + n > this.end) return null;
    return { values: this.samples.slice(k, k + n), sent: this.have.slice(k, k + n) };
  }

  close(): void {
    this.ws.terminate();
  }
}
