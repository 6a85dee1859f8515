// Decimation keeps what a plot shows: every pixel column's lowest and highest point, or one
// point per occupied pixel cell. Checked against a brute-force scan of the same points.
import { describe, expect, it } from "vitest";
import { decimate, decimateCells } from "../decimate";
import { groupReplicates } from "../stats";

function noisyData(n: number, seed: number): { xs: Float64Array; ys: Float64Array } {
  let s = seed;
  const rand = (): number => {
    s = (s * 1103515245 + 12345) % 2147483648; // a classic LCG (ANSI C example constants)
    return s / 2147483648;
  };
  const xs = new Float64Array(n);
  const ys = new Float64Array(n);
  for (let i = 0; i < n; i++) {
    xs[i] = rand() * 10;
    ys[i] = Math.sin(xs[i]!) + (rand() - 0.5) * 0.3;
  }
  return { xs, ys };
}

describe("decimate", () => {
  const width = 300;
  const xScale = (x: number): number => (x / 10) * width;

  it("keeps the min and max of every pixel column", () => {
    const { xs, ys } = noisyData(100_000, 42);
    xs[7] = NaN; // non-finite points are never drawn
    ys[9] = Infinity;
    const keep = decimate(xs, ys, width, xScale);
    expect(keep.length).toBeLessThanOrEqual(2 * width);
    // Brute force: the extremes of each column over all finite points.
    const lo = new Array<number>(width).fill(Infinity);
    const hi = new Array<number>(width).fill(-Infinity);
    for (let i = 0; i < xs.length; i++) {
      if (!Number.isFinite(xs[i]!) || !Number.isFinite(ys[i]!)) continue;
      const c = Math.floor(xScale(xs[i]!));
      lo[c] = Math.min(lo[c]!, ys[i]!);
      hi[c] = Math.max(hi[c]!, ys[i]!);
    }
    const klo = new Array<number>(width).fill(Infinity);
    const khi = new Array<number>(width).fill(-Infinity);
    for (const i of keep) {
      expect(Number.isFinite(ys[i]!) && Number.isFinite(xs[i]!)).toBe(true);
      const c = Math.floor(xScale(xs[i]!));
      klo[c] = Math.min(klo[c]!, ys[i]!);
      khi[c] = Math.max(khi[c]!, ys[i]!);
    }
    expect(klo).toEqual(lo);
    expect(khi).toEqual(hi);
    for (let k = 1; k < keep.length; k++) expect(keep[k]!).toBeGreaterThan(keep[k - 1]!);
  });

  it("drops points outside the plot and keeps a lone point once", () => {
    const keep = decimate([-1, 5, 11], [0, 1, 2], width, xScale);
    expect([...keep]).toEqual([1]);
    expect(() => decimate([1, 2], [1], width, xScale)).toThrowError(/same length/);
  });
});

describe("decimateCells", () => {
  it("keeps exactly one point in every occupied cell", () => {
    const { xs, ys } = noisyData(50_000, 7);
    const w = 200;
    const h = 100;
    const xScale = (x: number): number => (x / 10) * w;
    const yScale = (y: number): number => ((1.3 - y) / 2.6) * h;
    const keep = decimateCells(xs, ys, w, h, xScale, yScale, 2);
    const cellOf = (i: number): number =>
      Math.floor(yScale(ys[i]!) / 2) * 100 + Math.floor(xScale(xs[i]!) / 2);
    const occupied = new Set<number>();
    for (let i = 0; i < xs.length; i++) {
      const px = xScale(xs[i]!);
      const py = yScale(ys[i]!);
      if (px >= 0 && px < w && py >= 0 && py < h) occupied.add(cellOf(i));
    }
    const keptCells = [...keep].map(cellOf);
    expect(new Set(keptCells).size).toBe(keptCells.length);
    expect(new Set(keptCells)).toEqual(occupied);
  });
});

describe("groupReplicates", () => {
  it("gives each x its mean and sample standard deviation", () => {
    // 2, 4, 4, 4, 5, 5, 7, 9: mean 5, population sd 2, sample sd sqrt(32 / 7) (the usual worked
    // example of the standard deviation; from memory).
    const xs = [1, 1, 1, 1, 1, 1, 1, 1, 0.5, 2, 2];
    const ys = [2, 4, 4, 4, 5, 5, 7, 9, 3, 10, 12];
    const groups = groupReplicates(xs, ys);
    expect(groups.map((g) => g.x)).toEqual([0.5, 1, 2]);
    const g1 = groups[1]!;
    expect(g1.n).toBe(8);
    expect(g1.mean).toBe(5);
    expect(g1.sd).toBeCloseTo(Math.sqrt(32 / 7), 14);
    expect(groups[0]!.sd).toBeNaN(); // a single point has no spread
    expect(groups[2]!.sd).toBeCloseTo(Math.SQRT2, 14);
  });

  it("leaves out skipped and non-finite points", () => {
    const groups = groupReplicates([1, 1, 1, 2], [1, 3, 100, NaN], [false, false, true, false]);
    expect(groups).toHaveLength(1);
    expect(groups[0]!.indices).toEqual([0, 1]);
    expect(groups[0]!.mean).toBe(2);
  });
});
