// Sampling a curve across the visible x range and turning pixel samples into an SVG path.
// Pure: no DOM. Shared by the plot and the drag benchmark (js/bench/), so the benchmark times
// the same code the plot runs on every frame of a drag.

/** `m` x values evenly spaced on the axis between d0 and d1 (in decades on a log axis). */
export function sampleAxis(d0: number, d1: number, log: boolean, m: number, out?: Float64Array): Float64Array {
  const xs = out && out.length === m ? out : new Float64Array(m);
  const a0 = log ? Math.log10(d0) : d0;
  const a1 = log ? Math.log10(d1) : d1;
  for (let i = 0; i < m; i++) {
    const a = m === 1 ? a0 : a0 + ((a1 - a0) * i) / (m - 1);
    xs[i] = log ? 10 ** a : a;
  }
  return xs;
}

/**
 * An SVG path through pixel points, broken where a point is not finite (the curve is undefined
 * there). Far-off values are clamped to ±1e5 px so the path stays valid for the renderer.
 */
export function pathFromPixels(px: ArrayLike<number>, py: ArrayLike<number>): string {
  const limit = 1e5;
  const parts: string[] = [];
  let pen = false;
  const n = Math.min(px.length, py.length);
  for (let i = 0; i < n; i++) {
    const X = px[i]!;
    const Y = py[i]!;
    if (!Number.isFinite(X) || !Number.isFinite(Y)) {
      pen = false;
      continue;
    }
    const Yc = Math.max(-limit, Math.min(limit, Y));
    parts.push(`${pen ? "L" : "M"}${X.toFixed(2)},${Yc.toFixed(2)}`);
    pen = true;
  }
  return parts.join("");
}

/**
 * An SVG path filling the area between two pixel curves over the same x (a band): one closed
 * sub-path per run of points where x and both bounds are finite (the band is undefined
 * elsewhere), along the upper bound and back along the lower. Runs of a single point have no
 * area and are left out. Values are clamped to ±1e5 px as in pathFromPixels.
 */
export function areaFromPixels(px: ArrayLike<number>, pyLo: ArrayLike<number>, pyHi: ArrayLike<number>): string {
  const limit = 1e5;
  const clamp = (v: number): string => Math.max(-limit, Math.min(limit, v)).toFixed(2);
  const n = Math.min(px.length, pyLo.length, pyHi.length);
  const parts: string[] = [];
  const run = (a: number, b: number): void => {
    if (b - a < 2) return;
    let d = "";
    for (let i = a; i < b; i++) d += `${i === a ? "M" : "L"}${clamp(px[i]!)},${clamp(pyHi[i]!)}`;
    for (let i = b - 1; i >= a; i--) d += `L${clamp(px[i]!)},${clamp(pyLo[i]!)}`;
    parts.push(`${d}Z`);
  };
  let start = -1;
  for (let i = 0; i <= n; i++) {
    const ok = i < n && Number.isFinite(px[i]!) && Number.isFinite(pyLo[i]!) && Number.isFinite(pyHi[i]!);
    if (ok && start < 0) start = i;
    else if (!ok && start >= 0) {
      run(start, i);
      start = -1;
    }
  }
  return parts.join("");
}
