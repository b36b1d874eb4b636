/**
 * The numpy peer (bench/numpy_peer.py): the same live chain written plainly in numpy, run as a child
 * process so the benchmark can report ours/numpy. Python is optional: when python3 or numpy is
 * missing, or the peer fails, runNumpyPeer prints one note and returns null, and the benchmark goes on.
 *
 * The machine sets OPENBLAS_CORETYPE / OPENBLAS_L2_SIZE for older OpenBLAS builds; they are removed
 * from the child's environment only (a current OpenBLAS detects the core itself), so numpy runs
 * its BLAS as installed. The peer reports which BLAS, core type and thread count it actually ran.
 */
import { spawn } from 'node:child_process';
import { writeFile } from 'node:fs/promises';
import { fileURLToPath } from 'node:url';
import type { AngleRangeDeg } from '../server/dsp/steering.ts';

/** The peer script, next to this file. */
export const NUMPY_PEER_SCRIPT = fileURLToPath(new URL('./numpy_peer.py', import.meta.url));

/** Environment variables removed from the peer's environment (and only from it). */
export const PEER_UNSET_ENV = ['OPENBLAS_CORETYPE', 'OPENBLAS_L2_SIZE'] as const;

export interface NumpyPeerOptions {
  /** Raw float32 little-endian samples, interleaved by channel (see {@link writeRawFloat32}). */
  rawPath: string;
  channels: number;
  sampleRateHz: number;
  /** Array JSON with `positions: [[x, y, z], …]` in metres (config/arrays/*.json). */
  arrayPath: string;
  grid: { azimuthDeg: AngleRangeDeg; elevationDeg?: AngleRangeDeg };
  bandHz: [number, number];
  /** Forgetting factor per hop, in (0, 1). */
  lambda: number;
  /** Spectrum updates per second of signal. */
  spectrumRateHz: number;
  fftSize: number;
  /** MVDR loading δ = loadingRatio · tr(R)/M. */
  loadingRatio: number;
  /** Default 343.2 m/s. */
  speedOfSoundMps?: number;
  /** Write the final broadband MVDR spectrum (dB, one value per direction) to this .npy or .json file. */
  checkPath?: string;
  /**
   * How the peer evaluates the quadratic forms vᴴAv over bins × directions (see numpy_peer.py
   * --quad): 'matmul' (default: batched BLAS product, then a two-operand einsum), 'einsum'
   * (the three-operand einsum with optimize=True) or 'einsum-literal' (without optimize).
   */
  quad?: 'matmul' | 'einsum' | 'einsum-literal';
  /** Default 'python3'. */
  python?: string;
  /** Kill the peer after this long; default 600 000 ms. */
  timeoutMs?: number;
}

/** What the peer prints (see bench/numpy_peer.py). Times in seconds unless the name says ms. */
export interface PeerResult {
  peer: 'numpy';
  numpy_version: string;
  python_version: string;
  /** Where the BLAS facts came from and what they are (threadpoolctl, the loaded OpenBLAS, or numpy's build config). */
  blas: Record<string, unknown>;
  /** OPENBLAS_* / OMP_NUM_THREADS as the peer saw them. */
  env: Record<string, string>;
  quad: 'matmul' | 'einsum' | 'einsum-literal';
  channels: number;
  bins: number;
  directions: number;
  snapshots: number;
  seconds_of_signal: number;
  /** Wall seconds for the whole chain: STFT, covariance per hop, both spectra at every tick. */
  chain_s: number;
  /** chain_s / seconds_of_signal. */
  chain_rtf: number;
  /** Median over ticks of one MVDR spectrum update (loading, batched inverse, quadratic forms, broadband, dB). */
  mvdr_spectrum_ms_p50: number;
  /** Median over ticks of one conventional spectrum update. */
  conventional_ms_p50: number;
  mvdr_spectrum_ms_p90: number;
  mvdr_spectrum_ms_max: number;
  ticks: number;
  /** Seconds over the whole signal per stage: batched STFT, covariance updates, both spectra at all ticks. */
  stft_s: number;
  covariance_s: number;
  spectra_s: number;
  check?: { path: string; first: number[]; max_db: number; argmax: number };
  last_mvdr_db_first?: number[];
}

/** Write interleaved samples (frame-major: sample i of channel c at [i·M + c]) as raw float32 little-endian. */
export async function writeRawFloat32(path: string, interleaved: Float32Array): Promise<void> {
  // Float32Array is in the platform's byte order; every platform Node runs on here is little-endian.
  await writeFile(path, new Uint8Array(interleaved.buffer, interleaved.byteOffset, interleaved.byteLength));
}

/** Convert one planar block (data[c·frames + i]) into interleaved frames, written at out[offset…]. */
export function interleaveInto(out: Float32Array, offset: number, planar: Float32Array, channels: number, frames: number): void {
  for (let c = 0; c < channels; c++) {
    const src = c * frames;
    for (let i = 0; i < frames; i++) out[offset + i * channels + c] = planar[src + i];
  }
}

function rangeArgs(flag: string, r: AngleRangeDeg): string[] {
  return [flag, String(r.startDeg), String(r.stopDeg), String(r.stepDeg)];
}

/** The peer's command line (without the interpreter). */
export function numpyPeerArgs(opts: NumpyPeerOptions): string[] {
  const args = [
    NUMPY_PEER_SCRIPT,
    '--raw', opts.rawPath,
    '--channels', String(opts.channels),
    '--rate', String(opts.sampleRateHz),
    '--array', opts.arrayPath,
    '--fft-size', String(opts.fftSize),
    '--band', String(opts.bandHz[0]), String(opts.bandHz[1]),
    ...rangeArgs('--az', opts.grid.azimuthDeg),
    ...(opts.grid.elevationDeg ? rangeArgs('--el', opts.grid.elevationDeg) : []),
    '--lambda', String(opts.lambda),
    '--loading-ratio', String(opts.loadingRatio),
    '--spectrum-rate', String(opts.spectrumRateHz),
    '--c', String(opts.speedOfSoundMps ?? 343.2),
  ];
  if (opts.checkPath) args.push('--check', opts.checkPath);
  if (opts.quad) args.push('--quad', opts.quad);
  return args;
}

/**
 * Run the numpy peer on a raw file. Resolves to its result, or to null (after printing a note on
 * stderr) when python3 or numpy is absent or the peer fails; never rejects.
 */
export async function runNumpyPeer(opts: NumpyPeerOptions): Promise<PeerResult | null> {
  const python = opts.python ?? 'python3';
  const env: NodeJS.ProcessEnv = { ...process.env };
  for (const k of PEER_UNSET_ENV) delete env[k];
  const note = (msg: string) => {
    console.error(`numpy peer skipped: ${msg}`);
    return null;
  };
  return new Promise<PeerResult | null>((resolve) => {
    let stdout = '';
    let stderr = '';
    let settled = false;
    const done = (v: PeerResult | null) => {
      if (settled) return;
      settled = true;
      clearTimeout(timer);
      resolve(v);
    };
    const child = spawn(python, numpyPeerArgs(opts), { env, stdio: ['ignore', 'pipe', 'pipe'] });
    const timeoutMs = opts.timeoutMs ?? 600_000;
    const timer = setTimeout(() => {
      child.kill('SIGKILL');
      done(note(`timed out after ${timeoutMs} ms`));
    }, timeoutMs);
    child.stdout.setEncoding('utf8').on('data', (s: string) => (stdout += s));
    child.stderr.setEncoding('utf8').on('data', (s: string) => (stderr += s));
    child.on('error', (e: NodeJS.ErrnoException) => {
      done(note(e.code === 'ENOENT' ? `${python} not found` : `cannot start ${python}: ${e.message}`));
    });
    child.on('close', (code, signal) => {
      if (settled) return;
      const last = stdout.trim().split('\n').pop() ?? '';
      if (code === 3) {
        let msg = 'numpy is not installed';
        try {
          msg = (JSON.parse(last) as { error?: string }).error ?? msg;
        } catch {
          /* keep the default message */
        }
        done(note(msg));
        return;
      }
      if (code !== 0) {
        const tail = stderr.trim().split('\n').slice(-5).join('\n');
        done(note(`${python} exited with ${signal ?? code}${tail ? `:\n${tail}` : ''}`));
        return;
      }
      try {
        done(JSON.parse(last) as PeerResult);
      } catch {
        done(note(`unreadable output: ${last.slice(0, 200)}`));
      }
    });
  });
}
