// Thinning large point sets for drawing while keeping their visual shape (the fit always uses
// every point; only the picture is thinned). Pure: no DOM, no widget state.

/** Maps a data value to a pixel coordinate (a d3 scale works). */
export type PixelScale = (v: number) => number;

/**
 * Indices of the points with the lowest and the highest y in every pixel column.
 *
 * Columns are `floor(xScale(x))` for 0 <= column < pxWidth; points off the plot or with a
 * non-finite x or y are left out. The result is in increasing index order, with each index once,
 * so every column's vertical extent (the outline a line or a dense scatter shows) is kept.
 */
export function decimate(
  xs: ArrayLike<number>,
  ys: ArrayLike<number>,
  pxWidth: number,
  xScale: PixelScale,
): Uint32Array {
  if (xs.length !== ys.length) {
    throw new RangeError(`xs and ys must have the same length, got ${xs.length} and ${ys.length}.`);
  }
  const w = Math.max(0, Math.floor(pxWidth));
  const minIdx = new Int32Array(w).fill(-1);
  const maxIdx = new Int32Array(w).fill(-1);
  for (let i = 0; i < xs.length; i++) {
    const y = ys[i]!;
    if (!Number.isFinite(y) || !Number.isFinite(xs[i]!)) continue;
    const px = xScale(xs[i]!);
    if (!(px >= 0 && px < w)) continue;
    const c = Math.floor(px);
    const lo = minIdx[c]!;
    if (lo < 0) {
      minIdx[c] = i;
      maxIdx[c] = i;
      continue;
    }
    if (y < ys[lo]!) minIdx[c] = i;
    if (y > ys[maxIdx[c]!]!) maxIdx[c] = i;
  }
  return collect(xs.length, (mark) => {
    for (let c = 0; c < w; c++) {
      if (minIdx[c]! >= 0) {
        mark(minIdx[c]!);
        mark(maxIdx[c]!);
      }
    }
  });
}

/**
 * One point per occupied cell of a `cell` x `cell` pixel grid (the first in index order): a
 * scatter drawn from these looks the same as one drawn from all points, interior included.
 */
export function decimateCells(
  xs: ArrayLike<number>,
  ys: ArrayLike<number>,
  pxWidth: number,
  pxHeight: number,
  xScale: PixelScale,
  yScale: PixelScale,
  cell = 1,
): Uint32Array {
  if (xs.length !== ys.length) {
    throw new RangeError(`xs and ys must have the same length, got ${xs.length} and ${ys.length}.`);
  }
  if (!(cell > 0)) throw new RangeError(`cell must be positive, got ${cell}.`);
  const cols = Math.max(0, Math.ceil(pxWidth / cell));
  const rows = Math.max(0, Math.ceil(pxHeight / cell));
  const seen = new Uint8Array(cols * rows);
  const keep: number[] = [];
  for (let i = 0; i < xs.length; i++) {
    const px = xScale(xs[i]!);
    const py = yScale(ys[i]!);
    if (!(px >= 0 && px < pxWidth && py >= 0 && py < pxHeight)) continue;
    const k = Math.floor(py / cell) * cols + Math.floor(px / cell);
    if (seen[k] === 0) {
      seen[k] = 1;
      keep.push(i);
    }
  }
  return Uint32Array.from(keep);
}

function collect(n: number, fill: (mark: (i: number) => void) => void): Uint32Array {
  const flags = new Uint8Array(n);
  let count = 0;
  fill((i) => {
    if (flags[i] === 0) {
      flags[i] = 1;
      count++;
    }
  });
  const out = new Uint32Array(count);
  let k = 0;
  for (let i = 0; i < n; i++) if (flags[i] === 1) out[k++] = i;
  return out;
}
