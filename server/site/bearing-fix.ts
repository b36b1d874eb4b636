/**
 * The bearings-only least-squares fix on the site plan and its uncertainty: Stansfield's
 * pseudo-linear estimate refined by Gauss–Newton on the angles, the covariance from the Fisher
 * information, its 1-σ ellipse (docs/site-location.md). Pure functions, used by locate.ts.
 */

const RAD = Math.PI / 180;

/** Angle to (−π, π]. */
export function wrapPi(a: number): number {
  const r = a - 2 * Math.PI * Math.floor((a + Math.PI) / (2 * Math.PI));
  return r <= -Math.PI ? r + 2 * Math.PI : r;
}

export interface PlanFix {
  xM: number;
  yM: number;
  /** Inverse Fisher information, m² [sxx, sxy, syy]. */
  covXY: [number, number, number];
  /** Σ (e_i/σ_i)² at the fix. */
  chi2: number;
  iterations: number;
}

/**
 * The bearings-only least-squares fix on the plan (see the file's comment).
 * @param ox, oy array origins, metres; thetaRad site azimuths; sigmaRad their σ (all length n ≥ 2)
 * @param start where Gauss–Newton starts (default: the pseudo-linear estimate)
 * @param refine false: the pseudo-linear estimate only (screening candidates: a few times cheaper)
 * @returns null when the lines give no fix (parallel, or every start behind an array)
 */
export function bearingsFix(ox: ArrayLike<number>, oy: ArrayLike<number>, thetaRad: ArrayLike<number>, sigmaRad: ArrayLike<number>, start?: [number, number], refine = true): PlanFix | null {
  const n = ox.length;
  if (n < 2) return null;
  let x: number;
  let y: number;
  if (start && refine) {
    [x, y] = start;
  } else {
    // Pseudo-linear start: n_i·(x − p_i) = 0 with n_i = (sin θ, −cos θ), weights 1/(r σ)², r from the
    // previous pass (1 at first).
    x = 0;
    y = 0;
    for (let pass = 0; pass < 2; pass++) {
      let a = 0, b = 0, c = 0, u = 0, v = 0;
      for (let i = 0; i < n; i++) {
        const r2 = pass === 0 ? 1 : Math.max((x - ox[i]) ** 2 + (y - oy[i]) ** 2, 1e-6);
        const w = 1 / (r2 * sigmaRad[i] * sigmaRad[i]);
        const s = Math.sin(thetaRad[i]), k = -Math.cos(thetaRad[i]);
        const d = s * ox[i] + k * oy[i];
        a += w * s * s; b += w * s * k; c += w * k * k; u += w * s * d; v += w * k * d;
      }
      const det = a * c - b * b;
      if (!(Math.abs(det) > 1e-12 * (a * c + 1e-300))) return null;
      x = (c * u - b * v) / det;
      y = (a * v - b * u) / det;
    }
  }
  const cost = (px: number, py: number): number => {
    let s = 0;
    for (let i = 0; i < n; i++) {
      const e = wrapPi(Math.atan2(py - oy[i], px - ox[i]) - thetaRad[i]) / sigmaRad[i];
      s += e * e;
    }
    return s;
  };
  let f = cost(x, y);
  let iterations = 0;
  // Gauss–Newton on the angles, the step halved while it does not lower the cost.
  for (; refine && iterations < 100; iterations++) {
    let a = 0, b = 0, c = 0, u = 0, v = 0;
    for (let i = 0; i < n; i++) {
      const dx = x - ox[i], dy = y - oy[i];
      const r2 = Math.max(dx * dx + dy * dy, 1e-12);
      const gx = -dy / r2, gy = dx / r2;
      const w = 1 / (sigmaRad[i] * sigmaRad[i]);
      const e = wrapPi(Math.atan2(dy, dx) - thetaRad[i]);
      a += w * gx * gx; b += w * gx * gy; c += w * gy * gy; u -= w * gx * e; v -= w * gy * e;
    }
    const det = a * c - b * b;
    if (!(det > 0)) return null;
    let sx = (c * u - b * v) / det;
    let sy = (a * v - b * u) / det;
    let step = 1;
    let fNew = cost(x + sx, y + sy);
    while (fNew > f && step > 1e-6) {
      step /= 2;
      sx /= 2;
      sy /= 2;
      fNew = cost(x + sx, y + sy);
    }
    if (fNew > f) break;
    x += sx;
    y += sy;
    f = fNew;
    if (Math.hypot(sx, sy) < 1e-10 * (1 + Math.hypot(x, y))) break;
  }
  const cov = fisherCovariance(ox, oy, sigmaRad, x, y);
  if (!cov) return null;
  return { xM: x, yM: y, covXY: cov, chi2: f, iterations };
}

/** J⁻¹, J = Σ g gᵀ/σ², g = (−Δy, Δx)/r²: the covariance of the fix at (x, y), m². */
export function fisherCovariance(ox: ArrayLike<number>, oy: ArrayLike<number>, sigmaRad: ArrayLike<number>, x: number, y: number): [number, number, number] | null {
  let a = 0, b = 0, c = 0;
  for (let i = 0; i < ox.length; i++) {
    const dx = x - ox[i], dy = y - oy[i];
    const r2 = Math.max(dx * dx + dy * dy, 1e-12);
    const gx = -dy / r2, gy = dx / r2;
    const w = 1 / (sigmaRad[i] * sigmaRad[i]);
    a += w * gx * gx; b += w * gx * gy; c += w * gy * gy;
  }
  const det = a * c - b * b;
  if (!(det > 1e-12 * a * c)) return null;
  return [c / det, -b / det, a / det];
}

/** Semi-axes (m) and orientation (degrees from +x, in (−90, 90]) of the 1-σ ellipse of a covariance. */
export function covarianceEllipse(cov: [number, number, number]): { majorM: number; minorM: number; angleDeg: number } {
  const [a, b, c] = cov;
  const mid = (a + c) / 2;
  const half = Math.hypot((a - c) / 2, b);
  return {
    majorM: Math.sqrt(Math.max(mid + half, 0)),
    minorM: Math.sqrt(Math.max(mid - half, 0)),
    angleDeg: (0.5 * Math.atan2(2 * b, a - c)) / RAD,
  };
}
