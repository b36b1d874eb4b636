#!/usr/bin/env python3
"""numpy peer for the benchmark's ours/numpy ratio: the live scan chain, written plainly in numpy.

It runs the same chain as server/dsp/scan-pipeline.ts with a forgetting factor:

- STFT: periodic square-root Hann w[n] = sin(pi n / N), hop N/2, no normalisation, and N/2 zeros
  in front of the signal (the streaming analyser starts primed, so one snapshot leaves per hop of
  input). All frames go through one np.fft.rfft call (a plain peer may batch).
- Band bins: centres in [lo, hi] Hz (300-6000 Hz at fs = 48 kHz, N = 512 -> bins 4...64, 61 bins),
  scaled by 2/N.
- Covariance per hop, over all bins at once: R_k = (1 - w_k) R_{k-1} + w_k x xᴴ with
  w_k = (1 - lambda) / c_k, c_k = lambda c_{k-1} + (1 - lambda), c_0 = 0 (the bias-corrected start
  of covariance.ts: R_1 = x_1 x_1ᴴ).
- At every spectrum-rate tick (after the hop in which t = k / rate is crossed):
  MVDR P = 1 / real(vᴴ (R + delta I)⁻¹ v), delta = ratio * tr(R) / M per bin, with one
  np.linalg.inv over the (B, M, M) stack; conventional P = real(vᴴ R v) / M² (unloaded). The
  quadratic forms over all (bin, direction) pairs are one einsum (--quad picks the contraction);
  broadband = mean over bins times B (band power), then 10 log10.
- Steering: u = (cos el cos az, cos el sin az, sin el), tau_m = -(p_m . u) / c,
  v_m = exp(-j 2 pi f tau_m) (server/dsp/steering.ts, far field).

Input: raw float32 little-endian, interleaved by channel (frame-major), and an array JSON
({"positions": [[x, y, z], ...]} in metres, or a bare list of triples).

Prints one JSON object on stdout. Exit status 3 (with a JSON {"error": ...} on stdout) when numpy
cannot be imported, 2 for bad arguments, 1 for anything else.
"""

from __future__ import annotations

import argparse
import ctypes
import json
import os
import sys
import time

try:
    import numpy as np
except ImportError as e:  # the caller treats this as "no peer", not as a failure
    print(json.dumps({"peer": "numpy", "error": f"numpy not importable: {e}"}))
    sys.exit(3)


def parse_args(argv: list[str]) -> argparse.Namespace:
    p = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    p.add_argument("--raw", required=True, help="raw float32 interleaved samples")
    p.add_argument("--channels", type=int, required=True)
    p.add_argument("--rate", type=float, required=True, help="sample rate, Hz")
    p.add_argument("--array", required=True, help="array JSON with positions in metres")
    p.add_argument("--fft-size", type=int, default=512)
    p.add_argument("--band", type=float, nargs=2, default=[300.0, 6000.0], metavar=("LO", "HI"))
    p.add_argument("--az", type=float, nargs=3, default=[0.0, 359.0, 1.0], metavar=("START", "STOP", "STEP"))
    p.add_argument("--el", type=float, nargs=3, default=None, metavar=("START", "STOP", "STEP"))
    p.add_argument("--lambda", dest="lam", type=float, default=0.99)
    p.add_argument("--loading-ratio", type=float, default=0.01, help="delta = ratio * tr(R) / M")
    p.add_argument("--spectrum-rate", type=float, default=20.0, help="spectrum updates per second")
    p.add_argument("--c", type=float, default=343.2, help="speed of sound, m/s")
    p.add_argument(
        "--quad",
        choices=QUAD_FORMS,
        default="matmul",
        help="how the quadratic forms vᴴAv over all bins and directions are evaluated: 'matmul' "
        "(default, fastest here) einsum('bdn,bdn->bd', V.conj() @ A, V) with the batched product "
        "through BLAS; 'einsum' einsum('bdm,bmn,bdn->bd', V.conj(), A, V, optimize=True); "
        "'einsum-literal' the same without optimize (one nested loop, slowest)",
    )
    p.add_argument("--check", default=None, help="write the final broadband MVDR spectrum (dB) to OUT.npy or OUT.json")
    a = p.parse_args(argv)
    n = a.fft_size
    if n < 2 or n & (n - 1):
        p.error(f"--fft-size must be a power of two, got {n}")
    if a.channels < 1:
        p.error("--channels must be >= 1")
    if not (0.0 < a.lam < 1.0):
        p.error(f"--lambda must be in (0, 1), got {a.lam}")
    if not (a.spectrum_rate > 0):
        p.error("--spectrum-rate must be > 0")
    return a


QUAD_FORMS = ("matmul", "einsum", "einsum-literal")


def quad_forms(Vc: np.ndarray, A: np.ndarray, V: np.ndarray, how: str) -> np.ndarray:
    """real(v_bdᴴ A_b v_bd) for every bin b and direction d: (B, D). Vc = V.conj(), (B, D, M)."""
    if how == "matmul":
        return np.einsum("bdn,bdn->bd", Vc @ A, V).real
    return np.einsum("bdm,bmn,bdn->bd", Vc, A, V, optimize=how == "einsum").real


def axis(start: float, stop: float, step: float) -> np.ndarray:
    # Inclusive of stop when it lands on the grid (as directionGrid in steering.ts).
    count = int(np.floor((stop - start) / step + 1e-9)) + 1
    return start + step * np.arange(count)


def load_positions(path: str) -> np.ndarray:
    with open(path, "r", encoding="utf-8") as f:
        doc = json.load(f)
    pos = doc["positions"] if isinstance(doc, dict) else doc
    p = np.asarray(pos, dtype=np.float64)
    if p.ndim != 2 or p.shape[1] != 3:
        raise ValueError(f"{path}: positions must be a list of [x, y, z]")
    return p


def blas_info() -> dict:
    """Which BLAS this process actually runs: threadpoolctl if importable, else ask a loaded
    OpenBLAS directly (its runtime core type and thread count), else numpy's build config."""
    try:
        from threadpoolctl import threadpool_info  # type: ignore

        pools = [
            {k: d.get(k) for k in ("internal_api", "version", "architecture", "num_threads", "threading_layer")}
            for d in threadpool_info()
        ]
        if pools:
            return {"source": "threadpoolctl", "pools": pools}
    except Exception:
        pass
    try:
        with open("/proc/self/maps", "r", encoding="utf-8") as f:
            libs = sorted({ln.split()[-1] for ln in f if "openblas" in ln.lower() and ln.split()[-1].startswith("/")})
        for lib in libs:
            dll = ctypes.CDLL(lib)
            for pre, suf in (("scipy_", "64_"), ("", "64_"), ("", "")):
                try:
                    cfg = getattr(dll, f"{pre}openblas_get_config{suf}")
                    core = getattr(dll, f"{pre}openblas_get_corename{suf}")
                    nth = getattr(dll, f"{pre}openblas_get_num_threads{suf}")
                except AttributeError:
                    continue
                cfg.restype = ctypes.c_char_p
                core.restype = ctypes.c_char_p
                nth.restype = ctypes.c_int
                return {
                    "source": "openblas",
                    "library": os.path.basename(lib),
                    "config": cfg().decode(),
                    "corename": core().decode(),
                    "num_threads": nth(),
                }
    except Exception:
        pass
    try:
        deps = np.show_config(mode="dicts").get("Build Dependencies", {})  # numpy >= 1.26
        b = deps.get("blas", {})
        return {"source": "numpy build config", "name": b.get("name"), "version": b.get("version"), "config": b.get("openblas configuration")}
    except Exception:
        return {"source": "unknown"}


def main(argv: list[str]) -> int:
    a = parse_args(argv)
    M = a.channels
    N = a.fft_size
    hop = N // 2
    fs = a.rate

    # ---- setup (not timed): samples, geometry, band, steering table -----------------------------
    raw = np.fromfile(a.raw, dtype="<f4")
    if raw.size % M:
        raise ValueError(f"{a.raw}: {raw.size} samples is not a multiple of {M} channels")
    x = raw.reshape(-1, M).T.astype(np.float64)  # (M, L)
    L = x.shape[1]
    pos = load_positions(a.array)
    if pos.shape[0] != M:
        raise ValueError(f"{a.array}: {pos.shape[0]} positions, --channels {M}")

    bin_hz = fs / N
    lo, hi = a.band
    start_bin = max(0, int(np.ceil(lo / bin_hz - 1e-9)))
    stop_bin = min(N // 2, int(np.floor(hi / bin_hz + 1e-9)))
    B = stop_bin - start_bin + 1
    if B < 1:
        raise ValueError(f"band {lo}-{hi} Hz holds no bin at N = {N}, fs = {fs}")
    freqs = np.arange(start_bin, stop_bin + 1) * bin_hz

    az = axis(*a.az)
    el = axis(*a.el) if a.el is not None else np.zeros(1)
    az_g, el_g = np.meshgrid(np.deg2rad(az), np.deg2rad(el))  # (nEl, nAz): azimuth fastest
    az_g, el_g = az_g.ravel(), el_g.ravel()
    D = az_g.size
    u = np.stack([np.cos(el_g) * np.cos(az_g), np.cos(el_g) * np.sin(az_g), np.sin(el_g)], axis=1)  # (D, 3)
    tau = -(u @ pos.T) / a.c  # (D, M)
    V = np.exp(-2j * np.pi * freqs[:, None, None] * tau[None, :, :])  # (B, D, M)
    Vc = V.conj()
    eye = np.eye(M)

    # ---- the chain (timed) -----------------------------------------------------------------------
    mvdr_ms: list[float] = []
    conv_ms: list[float] = []
    ticks = 0
    last_mvdr_db = None

    t0 = time.perf_counter()
    # STFT of every frame at once: (T, M, N) frames -> (T, B, M) band snapshots, scaled by 2/N.
    w = np.sin(np.pi * np.arange(N) / N)
    padded = np.concatenate([np.zeros((M, N - hop)), x], axis=1)
    T = (padded.shape[1] - N) // hop + 1 if padded.shape[1] >= N else 0
    frames = np.lib.stride_tricks.sliding_window_view(padded, N, axis=1)[:, ::hop][:, :T]  # (M, T, N), a view
    S = np.empty((T, B, M), dtype=np.complex128)
    for f0 in range(0, T, 256):  # batches of frames, so memory stays bounded for long or wide input
        X = np.fft.rfft(frames[:, f0 : f0 + 256] * w, axis=2)[:, :, start_bin : stop_bin + 1]  # (M, t, B)
        S[f0 : f0 + 256] = X.transpose(1, 2, 0) * (2.0 / N)

    t_stft = time.perf_counter() - t0
    t_cov = 0.0
    R = np.zeros((B, M, M), dtype=np.complex128)
    csum = 0.0
    rate = a.spectrum_rate
    for k in range(T):
        tk = time.perf_counter()
        xk = S[k]  # (B, M)
        csum = a.lam * csum + (1.0 - a.lam)
        wk = (1.0 - a.lam) / csum
        R *= 1.0 - wk
        R += (wk * xk)[:, :, None] * xk.conj()[:, None, :]  # w_k x xᴴ for every bin at once
        t_cov += time.perf_counter() - tk

        # Tick when the end of this hop crosses a multiple of 1/rate seconds.
        if np.floor((k + 1) * hop * rate / fs) > np.floor(k * hop * rate / fs):
            ticks += 1
            ta = time.perf_counter()
            delta = a.loading_ratio * np.trace(R, axis1=1, axis2=2).real / M  # (B,)
            Rinv = np.linalg.inv(R + delta[:, None, None] * eye)
            P = 1.0 / quad_forms(Vc, Rinv, V, a.quad)  # (B, D)
            mvdr_db = 10.0 * np.log10(P.mean(axis=0) * B)
            tb = time.perf_counter()
            Pc = quad_forms(Vc, R, V, a.quad) / (M * M)
            conv_db = 10.0 * np.log10(Pc.mean(axis=0) * B)
            tc = time.perf_counter()
            mvdr_ms.append((tb - ta) * 1e3)
            conv_ms.append((tc - tb) * 1e3)
            last_mvdr_db = mvdr_db
    chain_s = time.perf_counter() - t0

    seconds = L / fs
    out = {
        "peer": "numpy",
        "numpy_version": np.__version__,
        "python_version": sys.version.split()[0],
        "blas": blas_info(),
        "env": {k: os.environ[k] for k in ("OPENBLAS_CORETYPE", "OPENBLAS_L2_SIZE", "OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS") if k in os.environ},
        "quad": a.quad,
        "channels": M,
        "bins": B,
        "directions": D,
        "snapshots": T,
        "seconds_of_signal": seconds,
        "chain_s": chain_s,
        "chain_rtf": chain_s / seconds if seconds > 0 else None,
        "mvdr_spectrum_ms_p50": float(np.median(mvdr_ms)) if mvdr_ms else None,
        "conventional_ms_p50": float(np.median(conv_ms)) if conv_ms else None,
        "mvdr_spectrum_ms_p90": float(np.percentile(mvdr_ms, 90)) if mvdr_ms else None,
        "mvdr_spectrum_ms_max": float(np.max(mvdr_ms)) if mvdr_ms else None,
        "ticks": ticks,
        # Per stage, seconds over the whole signal (the rest of chain_s is loop overhead).
        "stft_s": t_stft,
        "covariance_s": t_cov,
        "spectra_s": (sum(mvdr_ms) + sum(conv_ms)) / 1e3,
    }

    if a.check is not None:
        # The spectrum of the final covariance (after the last hop, tick or not), as ScanPipeline's
        # result() would scan it. Not timed.
        delta = a.loading_ratio * np.trace(R, axis1=1, axis2=2).real / M
        Rinv = np.linalg.inv(R + delta[:, None, None] * eye)
        P = 1.0 / quad_forms(Vc, Rinv, V, "matmul")
        final_db = 10.0 * np.log10(P.mean(axis=0) * B)
        if a.check.endswith(".npy"):
            np.save(a.check, final_db)
        else:
            with open(a.check, "w", encoding="utf-8") as f:
                json.dump({"mvdrDb": final_db.tolist(), "directions": D, "nAz": int(az.size), "nEl": int(el.size)}, f)
        out["check"] = {"path": a.check, "first": [round(float(v), 4) for v in final_db[:5]], "max_db": float(final_db.max()), "argmax": int(final_db.argmax())}
    elif last_mvdr_db is not None:
        out["last_mvdr_db_first"] = [round(float(v), 4) for v in last_mvdr_db[:5]]

    print(json.dumps(out))
    return 0


if __name__ == "__main__":
    try:
        sys.exit(main(sys.argv[1:]))
    except (OSError, ValueError, KeyError) as e:
        print(f"numpy_peer: {e}", file=sys.stderr)
        sys.exit(1)
