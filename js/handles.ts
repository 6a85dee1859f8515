// The handle solver: where a handle sits for given parameters, and which parameter values put a
// dragged handle (or a set of pins) where the user dropped it. Pure: no DOM, no widget state.
//
// Both problems are small nonlinear least squares (1 to a few unknowns), solved by a damped
// Gauss-Newton / Levenberg-Marquardt iteration with central-difference derivatives and simple
// bounds (active set + projection). Distances are measured in screen-normalised units (log10 on
// a log axis, divided by the visible span) so "close" means close on screen.

import { ExprError, evalCurve, evalScalar } from "./expr";

export interface HandleSpec {
  name: string;
  label: string;
  /** Tree of parameters only (no x) for the handle's x position. */
  x: unknown;
  /** Tree of parameters only (no x) for the handle's y position. */
  y: unknown;
  /** The parameters a drag of this handle changes. */
  moves: readonly string[];
}

export interface Point {
  x: number;
  y: number;
}

export type Bounds = Readonly<Record<string, readonly [number, number]>>;

export interface SolveOptions {
  xLog: boolean;
  yLog: boolean;
  /** Per-parameter [lower, upper]; a missing entry means unbounded. */
  bounds: Bounds;
  /** Parameters solved in log space (they must stay positive). */
  logParams: ReadonlySet<string>;
  /** Parameters never moved even if listed as moved or free (the user fixed them). */
  fixed?: ReadonlySet<string>;
  /**
   * Visible plot span in axis units (decades on a log axis); residuals are divided by it.
   * Defaults: 1 decade on a log axis, else the magnitude of the target (or 1).
   */
  span?: { x?: number; y?: number };
  /** Stop when the screen-normalised distance is below this (default 1e-10). */
  tol?: number;
  maxIter?: number;
}

export interface SolveResult {
  params: Record<string, number>;
  /** The iteration stopped normally: target reached or no further improvement possible. */
  converged: boolean;
  /** The residual distance is within `tol`: the handle (or every pin) is where it was asked. */
  reached: boolean;
  /** A bound stopped at least one parameter; see `clampedParams`. */
  clamped: boolean;
  clampedParams: string[];
  /** Final screen-normalised distance (root of the sum of squared residuals). */
  distance: number;
  iterations: number;
  message: string;
}

/** Raised for a request the solver cannot even start (unknown parameter, bad target). */
export class SolveError extends Error {
  constructor(message: string) {
    super(message);
    this.name = "SolveError";
  }
}

/** The handle's (x, y) for the given parameter values. */
export function handlePosition(handle: HandleSpec, params: Readonly<Record<string, number>>): Point {
  return { x: evalScalar(handle.x, params), y: evalScalar(handle.y, params) };
}

// ---------------------------------------------------------------------------------------------
// Generic bounded Levenberg-Marquardt on a few unknowns
// ---------------------------------------------------------------------------------------------

export interface LMProblem {
  /** Number of unknowns. */
  n: number;
  /** Number of residuals. */
  m: number;
  /** Fill `out` (length m) with residuals at u; NaN anywhere marks u as infeasible. */
  residuals(u: Float64Array, out: Float64Array): void;
  lower: Float64Array;
  upper: Float64Array;
  /** Typical magnitude of each unknown, for difference steps (default max(|u0|, 1e-3)). */
  typical?: Float64Array;
}

export interface LMResult {
  u: Float64Array;
  cost: number; // 0.5 * sum r^2
  iterations: number;
  converged: boolean;
  /** Unknowns whose bound was met during the solve and which end on it. */
  atBound: boolean[];
  message: string;
}

/** Solve the n x n system A z = b in place by Gaussian elimination with partial pivoting. */
function solveDense(A: Float64Array, b: Float64Array, n: number): boolean {
  for (let c = 0; c < n; c++) {
    let piv = c;
    for (let r = c + 1; r < n; r++) {
      if (Math.abs(A[r * n + c]!) > Math.abs(A[piv * n + c]!)) piv = r;
    }
    if (!(Math.abs(A[piv * n + c]!) > 0)) return false;
    if (piv !== c) {
      for (let k = 0; k < n; k++) {
        const t = A[c * n + k]!;
        A[c * n + k] = A[piv * n + k]!;
        A[piv * n + k] = t;
      }
      const t = b[c]!;
      b[c] = b[piv]!;
      b[piv] = t;
    }
    for (let r = c + 1; r < n; r++) {
      const f = A[r * n + c]! / A[c * n + c]!;
      if (f === 0) continue;
      for (let k = c; k < n; k++) A[r * n + k] = A[r * n + k]! - f * A[c * n + k]!;
      b[r] = b[r]! - f * b[c]!;
    }
  }
  for (let r = n - 1; r >= 0; r--) {
    let s = b[r]!;
    for (let k = r + 1; k < n; k++) s -= A[r * n + k]! * b[k]!;
    b[r] = s / A[r * n + r]!;
  }
  return true;
}

function halfSumSq(r: Float64Array): number {
  let s = 0;
  for (let i = 0; i < r.length; i++) {
    const v = r[i]!;
    if (!Number.isFinite(v)) return Infinity;
    s += v * v;
  }
  return 0.5 * s;
}

/**
 * Minimise 0.5 * |r(u)|^2 subject to lower <= u <= upper.
 *
 * Central differences (one-sided next to an infeasible point); Marquardt's diagonal scaling;
 * unknowns held at a bound by a gradient pointing outwards are left out of the step (active set),
 * and every trial point is projected into the box.
 */
export function levenbergMarquardt(
  problem: LMProblem,
  u0: Float64Array,
  opts: { costTol: number; maxIter: number },
): LMResult {
  const { n, m, lower, upper } = problem;
  const u = Float64Array.from(u0);
  const typical =
    problem.typical ?? Float64Array.from(u0, (v) => Math.max(Math.abs(v), 1e-3));
  const touched = new Array<boolean>(n).fill(false);
  for (let j = 0; j < n; j++) {
    if (u[j]! < lower[j]!) {
      u[j] = lower[j]!;
      touched[j] = true;
    } else if (u[j]! > upper[j]!) {
      u[j] = upper[j]!;
      touched[j] = true;
    }
  }
  const r = new Float64Array(m);
  const rTrial = new Float64Array(m);
  const rp = new Float64Array(m);
  const rm = new Float64Array(m);
  const J = new Float64Array(m * n);
  const trial = new Float64Array(n);
  const work = new Float64Array(n);
  problem.residuals(u, r);
  let cost = halfSumSq(r);
  const finish = (converged: boolean, iterations: number, message: string): LMResult => ({
    u,
    cost,
    iterations,
    converged,
    atBound: touched.map((t, j) => t && (u[j] === lower[j] || u[j] === upper[j])),
    message,
  });
  if (!Number.isFinite(cost)) {
    return finish(false, 0, "the curve cannot be evaluated at the starting parameter values");
  }
  let lambda = 1e-3;
  for (let it = 1; it <= opts.maxIter; it++) {
    if (cost <= opts.costTol) return finish(true, it - 1, "reached the target");
    // Jacobian by central differences.
    for (let j = 0; j < n; j++) {
      const uj = u[j]!;
      const h = 1e-6 * Math.max(Math.abs(uj), typical[j]!);
      u[j] = uj + h;
      problem.residuals(u, rp);
      u[j] = uj - h;
      problem.residuals(u, rm);
      u[j] = uj;
      const okP = halfSumSq(rp) < Infinity;
      const okM = halfSumSq(rm) < Infinity;
      for (let i = 0; i < m; i++) {
        let d: number;
        if (okP && okM) d = (rp[i]! - rm[i]!) / (2 * h);
        else if (okP) d = (rp[i]! - r[i]!) / h;
        else if (okM) d = (r[i]! - rm[i]!) / h;
        else d = 0;
        J[i * n + j] = d;
      }
    }
    // Gradient g = J^T r and normal matrix A = J^T J.
    const g = new Float64Array(n);
    const A = new Float64Array(n * n);
    for (let j = 0; j < n; j++) {
      let s = 0;
      for (let i = 0; i < m; i++) s += J[i * n + j]! * r[i]!;
      g[j] = s;
      for (let k = 0; k <= j; k++) {
        let t = 0;
        for (let i = 0; i < m; i++) t += J[i * n + j]! * J[i * n + k]!;
        A[j * n + k] = t;
        A[k * n + j] = t;
      }
    }
    // Active set: a bound holds an unknown whose descent direction points out of the box.
    const free: number[] = [];
    for (let j = 0; j < n; j++) {
      const blockedLow = u[j]! <= lower[j]! && g[j]! > 0;
      const blockedHigh = u[j]! >= upper[j]! && g[j]! < 0;
      if (blockedLow || blockedHigh) touched[j] = true;
      else free.push(j);
    }
    let gNorm = 0;
    let maxDiag = 0;
    for (const j of free) {
      gNorm = Math.max(gNorm, Math.abs(g[j]!));
      maxDiag = Math.max(maxDiag, A[j * n + j]!);
    }
    if (free.length === 0 || gNorm <= 1e-15 * Math.max(1, cost) || maxDiag === 0) {
      const msg =
        free.length === 0
          ? "stopped at the parameters' bounds"
          : maxDiag === 0
            ? "the moved parameters do not change this position here"
            : "closest reachable point found";
      return finish(true, it - 1, msg);
    }
    // Damped steps until one lowers the cost (or the damping gives up).
    let accepted = false;
    while (lambda < 1e12) {
      const k = free.length;
      const Ar = new Float64Array(k * k);
      const br = new Float64Array(k);
      for (let a = 0; a < k; a++) {
        const ja = free[a]!;
        br[a] = -g[ja]!;
        for (let b = 0; b < k; b++) Ar[a * k + b] = A[ja * n + free[b]!]!;
        Ar[a * k + a] = Ar[a * k + a]! + lambda * Math.max(A[ja * n + ja]!, 1e-12 * maxDiag);
      }
      if (!solveDense(Ar, br, k)) {
        lambda *= 10;
        continue;
      }
      trial.set(u);
      work.fill(0);
      let stepSmall = true;
      for (let a = 0; a < k; a++) {
        const j = free[a]!;
        let v = u[j]! + br[a]!;
        if (v < lower[j]!) {
          v = lower[j]!;
          work[j] = 1;
        } else if (v > upper[j]!) {
          v = upper[j]!;
          work[j] = 1;
        }
        trial[j] = v;
        if (Math.abs(v - u[j]!) > 1e-14 * Math.max(Math.abs(u[j]!), 1e-3)) stepSmall = false;
      }
      if (stepSmall) return finish(true, it, "closest reachable point found");
      problem.residuals(trial, rTrial);
      const cTrial = halfSumSq(rTrial);
      if (cTrial < cost) {
        u.set(trial);
        r.set(rTrial);
        cost = cTrial;
        for (let j = 0; j < n; j++) if (work[j] === 1) touched[j] = true;
        lambda = Math.max(lambda * 0.3, 1e-12);
        accepted = true;
        break;
      }
      lambda *= 10;
    }
    if (!accepted) return finish(true, it, "closest reachable point found");
  }
  return finish(cost <= opts.costTol, opts.maxIter, "stopped after the iteration limit");
}

// ---------------------------------------------------------------------------------------------
// Parameter transforms and the two front-end problems
// ---------------------------------------------------------------------------------------------

interface Unknowns {
  names: string[];
  logSpace: boolean[];
  u0: Float64Array;
  typical: Float64Array;
  lower: Float64Array;
  upper: Float64Array;
}

function setUpUnknowns(
  names: readonly string[],
  params: Readonly<Record<string, number>>,
  opts: SolveOptions,
): Unknowns {
  const fixed = opts.fixed ?? new Set<string>();
  const chosen = [...new Set(names)].filter((n) => !fixed.has(n));
  const u0 = new Float64Array(chosen.length);
  const typical = new Float64Array(chosen.length);
  const lower = new Float64Array(chosen.length);
  const upper = new Float64Array(chosen.length);
  const logSpace: boolean[] = [];
  chosen.forEach((name, j) => {
    const v = params[name];
    if (typeof v !== "number" || !Number.isFinite(v)) {
      throw new SolveError(`parameter ${JSON.stringify(name)} has no finite value (got ${v}).`);
    }
    const [lo, hi] = opts.bounds[name] ?? [-Infinity, Infinity];
    if (!(lo <= hi)) {
      throw new SolveError(`parameter ${JSON.stringify(name)}: lower bound ${lo} is above upper ${hi}.`);
    }
    // Log space only where the value is positive; a zero or negative start cannot be logged.
    const useLog = opts.logParams.has(name) && v > 0;
    logSpace.push(useLog);
    if (useLog) {
      u0[j] = Math.log(v);
      typical[j] = 1; // a log-space step of 1e-6 is a relative change of 1e-6
      lower[j] = lo > 0 ? Math.log(lo) : -Infinity;
      upper[j] = hi > 0 ? Math.log(hi) : -Infinity;
    } else {
      u0[j] = v;
      typical[j] = v !== 0 ? Math.abs(v) : 1e-3;
      lower[j] = lo;
      upper[j] = hi;
    }
  });
  return { names: chosen, logSpace, u0, typical, lower, upper };
}

function toParams(
  unk: Unknowns,
  u: Float64Array,
  base: Readonly<Record<string, number>>,
  into: Record<string, number>,
): Record<string, number> {
  Object.assign(into, base);
  unk.names.forEach((name, j) => {
    into[name] = unk.logSpace[j] ? Math.exp(u[j]!) : u[j]!;
  });
  return into;
}

function axisValue(v: number, log: boolean): number {
  return log ? Math.log10(v) : v;
}

function spanFor(given: number | undefined, log: boolean, ...refs: number[]): number {
  if (given !== undefined) {
    if (!(given > 0) || !Number.isFinite(given)) {
      throw new SolveError(`span must be a positive finite number, got ${given}.`);
    }
    return given;
  }
  if (log) return 1;
  const mag = Math.max(...refs.map((r) => (Number.isFinite(r) ? Math.abs(r) : 0)));
  return mag > 0 ? mag : 1;
}

function checkTarget(p: Point, opts: SolveOptions, what: string): void {
  if (!Number.isFinite(p.x) || !Number.isFinite(p.y)) {
    throw new SolveError(`${what} must have finite x and y, got (${p.x}, ${p.y}).`);
  }
  if (opts.xLog && !(p.x > 0)) {
    throw new SolveError(`${what}: x must be > 0 on a log x axis, got ${p.x}.`);
  }
  if (opts.yLog && !(p.y > 0)) {
    throw new SolveError(`${what}: y must be > 0 on a log y axis, got ${p.y}.`);
  }
}

function runSolve(
  unk: Unknowns,
  m: number,
  params: Readonly<Record<string, number>>,
  opts: SolveOptions,
  fill: (p: Record<string, number>, out: Float64Array) => void,
): SolveResult {
  const tol = opts.tol ?? 1e-10;
  const scratch: Record<string, number> = {};
  const result = (
    u: Float64Array,
    cost: number,
    converged: boolean,
    iterations: number,
    atBound: boolean[],
    message: string,
  ): SolveResult => {
    const clampedParams = unk.names.filter((_, j) => atBound[j]);
    const distance = Math.sqrt(2 * cost);
    return {
      params: toParams(unk, u, params, {}),
      converged,
      reached: distance <= tol,
      clamped: clampedParams.length > 0,
      clampedParams,
      distance,
      iterations,
      message,
    };
  };
  if (unk.names.length === 0) {
    const r = new Float64Array(m);
    fill({ ...params }, r);
    return result(new Float64Array(0), halfSumSq(r), false, 0, [], "no free parameter to move");
  }
  const lm = levenbergMarquardt(
    {
      n: unk.names.length,
      m,
      lower: unk.lower,
      upper: unk.upper,
      typical: unk.typical,
      residuals: (u, out) => fill(toParams(unk, u, params, scratch), out),
    },
    unk.u0,
    { costTol: 0.5 * tol * tol, maxIter: opts.maxIter ?? 100 },
  );
  return result(lm.u, lm.cost, lm.converged, lm.iterations, lm.atBound, lm.message);
}

/**
 * Parameter values that put `handle` at `target`, changing only `handle.moves` (minus fixed).
 *
 * Minimises the screen-normalised distance from the handle to the target; when the moved
 * parameters cannot reach it (a bound, or fewer unknowns than coordinates) the handle ends at
 * the closest reachable point and `reached` is false.
 */
export function solveHandle(
  handle: HandleSpec,
  params: Readonly<Record<string, number>>,
  target: Point,
  opts: SolveOptions,
): SolveResult {
  checkTarget(target, opts, `target for handle ${JSON.stringify(handle.name)}`);
  for (const name of handle.moves) {
    if (!(name in params)) {
      throw new SolveError(`handle ${JSON.stringify(handle.name)} moves unknown parameter ${JSON.stringify(name)}.`);
    }
  }
  const start = handlePosition(handle, params);
  const sx = spanFor(opts.span?.x, opts.xLog, target.x, start.x);
  const sy = spanFor(opts.span?.y, opts.yLog, target.y, start.y);
  const tx = axisValue(target.x, opts.xLog);
  const ty = axisValue(target.y, opts.yLog);
  const unk = setUpUnknowns(handle.moves, params, opts);
  return runSolve(unk, 2, params, opts, (p, out) => {
    try {
      const pos = handlePosition(handle, p);
      out[0] = (axisValue(pos.x, opts.xLog) - tx) / sx;
      out[1] = (axisValue(pos.y, opts.yLog) - ty) / sy;
    } catch (e) {
      if (!(e instanceof ExprError)) throw e;
      out.fill(NaN);
    }
  });
}

/**
 * Values of the `free` parameters that make the curve pass through every pin (least squares in
 * the vertical direction, screen-normalised), for models without declared handles.
 */
export function solvePins(
  curveTree: unknown,
  params: Readonly<Record<string, number>>,
  free: readonly string[],
  pins: readonly Point[],
  opts: SolveOptions,
): SolveResult {
  if (pins.length === 0) throw new SolveError("solvePins needs at least one pin.");
  pins.forEach((p, i) => checkTarget(p, opts, `pin ${i}`));
  for (const name of free) {
    if (!(name in params)) throw new SolveError(`unknown free parameter ${JSON.stringify(name)}.`);
  }
  const xs = Float64Array.from(pins, (p) => p.x);
  const ty = Float64Array.from(pins, (p) => axisValue(p.y, opts.yLog));
  const sy = spanFor(opts.span?.y, opts.yLog, ...pins.map((p) => p.y));
  const ys = new Float64Array(pins.length);
  const unk = setUpUnknowns(free, params, opts);
  return runSolve(unk, pins.length, params, opts, (p, out) => {
    evalCurve(curveTree, p, xs, ys);
    for (let i = 0; i < ys.length; i++) out[i] = (axisValue(ys[i]!, opts.yLog) - ty[i]!) / sy;
  });
}
