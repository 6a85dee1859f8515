// Pure logic of the widget's interactions (no DOM, nothing sent to Python): which handles the
// plot shows and how they are named for assistive technology, generic pins for models without
// declared handles, turning a drag or an arrow-key nudge into parameter values, and a throttle
// for kernel round trips. UI-only state; widget.ts wires it to the page and the synced model.

import { evalCurve, evalScalar } from "./expr";
import { type HandleSpec, type Point, type SolveOptions, type SolveResult, solveHandle, solvePins } from "./handles";
import { defaultRecord } from "./params";
import { type ModelJson, type Setting, boundsOf } from "./state";
import type { HandleView } from "./plot";
import { formatNumber } from "./validate";

/** What the plot needs to draw one handle (plot.ts draws it). */
export type HandleViewData = HandleView;


export const PIN_PREFIX = "pin:";
// More pins than this are hard to tell apart on a plot; models with more free parameters keep
// the rest where they are (their values can be typed in the panel).
export const MAX_PINS = 5;

/** Parameters a drag may change: every parameter not fixed, in model order. */
export function freeParams(model: ModelJson, params: Readonly<Record<string, Setting>>): string[] {
  return model.params.map((p) => p.name).filter((n) => !params[n]?.fixed);
}

/** The model's declared handles as solver specs. */
export function handleSpecs(model: ModelJson): HandleSpec[] {
  return model.handles.map((h) => ({ name: h.name, label: h.label, x: h.x, y: h.y, moves: h.moves }));
}

/** Whether the model is dragged by generic pins (a formula without declared handles). */
export function usesPins(model: ModelJson): boolean {
  return model.tree !== null && model.handles.length === 0;
}

/**
 * The accessible name of a handle: the feature and the parameters it moves, e.g.
 * "midpoint (IC50): moves log_ic50". Moved parameters that are fixed are named as held.
 */
export function handleAriaLabel(label: string, moves: readonly string[], fixed: ReadonlySet<string>): string {
  const free = moves.filter((m) => !fixed.has(m));
  const held = moves.filter((m) => fixed.has(m));
  let text = `${label}: moves ${free.length ? free.join(", ") : "nothing"}`;
  if (held.length) text += ` (${held.join(", ")} fixed)`;
  return text;
}

/** Views of the declared handles at the given parameter values (unplaceable ones left out). */
export function handleViews(
  model: ModelJson,
  values: Readonly<Record<string, number>>,
  fixed: ReadonlySet<string>,
): HandleViewData[] {
  const out: HandleViewData[] = [];
  for (const h of handleSpecs(model)) {
    let pos: Point;
    try {
      pos = { x: evalScalar(h.x, values), y: evalScalar(h.y, values) };
    } catch {
      continue;
    }
    const first = h.moves[0] ?? "";
    out.push({
      key: h.name,
      ariaLabel: handleAriaLabel(h.label || h.name, h.moves, fixed),
      valueNow: values[first] ?? NaN,
      valueText: h.moves.map((m) => `${m} = ${formatNumber(values[m])}`).join(", "),
      pos,
      pin: false,
    });
  }
  return out;
}

/**
 * Pins for a model without declared handles: one per free parameter (at most MAX_PINS), spread
 * evenly across the x range on the axis (in decades on a log axis), each on the curve.
 */
export function placePins(
  tree: unknown,
  values: Readonly<Record<string, number>>,
  nFree: number,
  xRange: readonly [number, number],
  xLog: boolean,
): Point[] {
  const n = Math.max(1, Math.min(MAX_PINS, nFree));
  let [lo, hi] = xRange;
  if (xLog) {
    if (!(lo > 0)) lo = hi > 0 ? hi / 100 : 1e-2;
    if (!(hi > 0)) hi = 100;
  }
  const a = xLog ? Math.log10(lo) : lo;
  const b = xLog ? Math.log10(hi) : hi;
  const xs = new Float64Array(n);
  for (let i = 0; i < n; i++) {
    const t = a + ((b - a) * (i + 0.5)) / n;
    xs[i] = xLog ? 10 ** t : t;
  }
  return pinsOnCurve(tree, values, Array.from(xs, (x) => ({ x, y: NaN })));
}

/** The same pins moved vertically onto the curve for the given values. */
export function pinsOnCurve(tree: unknown, values: Readonly<Record<string, number>>, pins: readonly Point[]): Point[] {
  const xs = Float64Array.from(pins, (p) => p.x);
  let ys: Float64Array;
  try {
    ys = evalCurve(tree, values, xs);
  } catch {
    ys = new Float64Array(xs.length).fill(NaN);
  }
  return pins.map((p, i) => ({ x: p.x, y: ys[i]! }));
}

/** Views of the pins (key "pin:<i>"). */
export function pinViews(pins: readonly Point[], free: readonly string[]): HandleViewData[] {
  const moved = free.length ? free.join(", ") : "nothing";
  return pins.map((p, i) => ({
    key: `${PIN_PREFIX}${i}`,
    ariaLabel: `curve point ${i + 1} of ${pins.length}: moves ${moved}`,
    valueNow: p.y,
    valueText: `x = ${formatNumber(p.x)}, y = ${formatNumber(p.y)}`,
    pos: p,
    pin: true,
  }));
}

/** Solver options from the synced settings and the visible axes. */
export function solveOptions(
  model: ModelJson,
  params: Readonly<Record<string, Setting>>,
  xLog: boolean,
  yLog: boolean,
  span: { x: number; y: number },
): SolveOptions {
  const bounds: Record<string, [number, number]> = {};
  const logParams = new Set<string>();
  const fixed = new Set<string>();
  for (const p of model.params) {
    bounds[p.name] = boundsOf(params[p.name] ?? defaultRecord(p));
    if (p.log_scale) logParams.add(p.name);
    if (params[p.name]?.fixed) fixed.add(p.name);
  }
  return { xLog, yLog, bounds, logParams, fixed, span, tol: 1e-9, maxIter: 60 };
}

/**
 * Parameter values that put the dragged handle or pin `key` at `target`.
 * For a pin, every other pin stays where it is and the free parameters are solved for all.
 */
export function solveDrag(
  model: ModelJson,
  key: string,
  values: Readonly<Record<string, number>>,
  target: Point,
  pins: readonly Point[],
  opts: SolveOptions,
): SolveResult | null {
  if (key.startsWith(PIN_PREFIX)) {
    const i = Number(key.slice(PIN_PREFIX.length));
    if (!Number.isInteger(i) || i < 0 || i >= pins.length || model.tree === null) return null;
    const moved = pins.map((p, j) => (j === i ? target : p));
    const free = model.params.map((p) => p.name).filter((n) => !opts.fixed?.has(n));
    if (free.length === 0) return null;
    return solvePins(model.tree, values, free, moved, opts);
  }
  const h = handleSpecs(model).find((s) => s.name === key);
  if (h === undefined) return null;
  return solveHandle(h, values, target, opts);
}

/** A short note on a drag's outcome for the person dragging, or "" when it simply worked. */
export function dragNote(res: SolveResult | null): string {
  if (res === null) return "";
  if (res.clamped) return `stopped at a bound of ${res.clampedParams.join(", ")}`;
  if (res.message === "no free parameter to move") return "every parameter this handle moves is fixed";
  return "";
}

/**
 * New `params` with some values replaced (bounds and fixed flags kept). The values come from
 * the drag solver, which stays in its box; the projection below only removes the round-off of
 * its log-space steps (exp(log(hi)) may exceed hi by an ulp). It is not a rule for bringing a
 * start inside its bounds: that one lives in Python (Parameters.inside_bounds), with a note.
 */
export function withValues<T extends Setting>(
  params: Readonly<Record<string, T>>,
  values: Readonly<Record<string, number>>,
): Record<string, T> {
  const out: Record<string, T> = {};
  for (const [name, s] of Object.entries(params)) {
    const v = values[name];
    if (typeof v !== "number" || !Number.isFinite(v) || s.fixed) {
      out[name] = { ...s };
      continue;
    }
    const [lo, hi] = boundsOf(s);
    out[name] = { ...s, value: Math.min(hi, Math.max(lo, v)) };
  }
  return out;
}

/** The x range of finite data values (positive ones only on a log axis), or null. */
export function dataRange(xs: ArrayLike<number>, xLog: boolean): [number, number] | null {
  let lo = Infinity;
  let hi = -Infinity;
  for (let i = 0; i < xs.length; i++) {
    const v = xs[i]!;
    if (!Number.isFinite(v) || (xLog && !(v > 0))) continue;
    if (v < lo) lo = v;
    if (v > hi) hi = v;
  }
  return lo <= hi ? [lo, hi] : null;
}

export interface Clock {
  now(): number;
  setTimeout(fn: () => void, ms: number): unknown;
  clearTimeout(id: unknown): void;
}

const realClock: Clock = {
  now: () => (typeof performance !== "undefined" ? performance.now() : Date.now()),
  setTimeout: (fn, ms) => setTimeout(fn, ms),
  clearTimeout: (id) => clearTimeout(id as ReturnType<typeof setTimeout>),
};

/**
 * Calls `fn` at most once per `intervalMs` with the latest argument: the first call runs at
 * once, calls within the interval are merged and the last one runs when it ends (so the final
 * state of a drag is always sent). Used for kernel round trips of callable-model previews.
 */
export function throttle<T>(fn: (arg: T) => void, intervalMs: number, clock: Clock = realClock): {
  call(arg: T): void;
  cancel(): void;
} {
  let last = -Infinity;
  let timer: unknown = null;
  let pending: { arg: T } | null = null;
  const fire = (): void => {
    timer = null;
    if (pending === null) return;
    const { arg } = pending;
    pending = null;
    last = clock.now();
    fn(arg);
  };
  return {
    call(arg: T): void {
      pending = { arg };
      const wait = last + intervalMs - clock.now();
      if (wait <= 0 && timer === null) fire();
      else if (timer === null) timer = clock.setTimeout(fire, Math.max(0, wait));
    },
    cancel(): void {
      if (timer !== null) clock.clearTimeout(timer);
      timer = null;
      pending = null;
    },
  };
}

/**
 * Parse the "excluded rows" field: row numbers and ranges separated by commas or spaces
 * ("3, 7 10-12"). Returns the sorted rows, or a message saying what is wrong.
 */
export function parseRows(text: string, nRows: number): { ok: true; rows: number[] } | { ok: false; message: string } {
  const rows = new Set<number>();
  for (const part of text.split(/[\s,;]+/).filter(Boolean)) {
    const m = /^(\d+)(?:\s*[-–]\s*(\d+))?$/.exec(part);
    if (!m) return { ok: false, message: `"${part}" is not a row number or a range like 3-7` };
    const a = Number(m[1]);
    const b = m[2] === undefined ? a : Number(m[2]);
    if (b < a) return { ok: false, message: `range ${part} runs backwards` };
    if (b >= nRows) return { ok: false, message: `row ${b} does not exist (rows are 0 to ${nRows - 1})` };
    for (let r = a; r <= b; r++) rows.add(r);
  }
  return { ok: true, rows: [...rows].sort((x, y) => x - y) };
}

/** The excluded rows as compact text: runs of three or more as ranges ("1, 4-9, 12"). */
export function formatRows(rows: readonly number[]): string {
  const sorted = [...new Set(rows)].sort((a, b) => a - b);
  const parts: string[] = [];
  for (let i = 0; i < sorted.length; ) {
    let j = i;
    while (j + 1 < sorted.length && sorted[j + 1] === sorted[j]! + 1) j++;
    if (j - i >= 2) parts.push(`${sorted[i]}-${sorted[j]}`);
    else for (let k = i; k <= j; k++) parts.push(String(sorted[k]));
    i = j + 1;
  }
  return parts.join(", ");
}

/**
 * y of a sampled curve at `x` by linear interpolation on the axis (in decades on a log x
 * axis); NaN outside the samples or next to an undefined sample. Places the pins of a callable
 * model, whose curve only the kernel can evaluate.
 */
export function curveAt(samples: { x: ArrayLike<number>; y: ArrayLike<number | null> } | null, x: number, xLog: boolean): number {
  if (samples === null) return NaN;
  const t = (v: number): number => (xLog ? Math.log10(v) : v);
  const tx = t(x);
  const n = Math.min(samples.x.length, samples.y.length);
  for (let i = 0; i + 1 < n; i++) {
    const a = t(samples.x[i]!);
    const b = t(samples.x[i + 1]!);
    if (!(tx >= Math.min(a, b) && tx <= Math.max(a, b))) continue;
    const ya = samples.y[i];
    const yb = samples.y[i + 1];
    if (typeof ya !== "number" || typeof yb !== "number") return NaN;
    return b === a ? ya : ya + ((yb - ya) * (tx - a)) / (b - a);
  }
  return NaN;
}
