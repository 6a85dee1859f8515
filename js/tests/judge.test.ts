// Judging views on the page: the band area path (curve.ts areaFromPixels), which bands are
// drawn for the toggles (judge.ts bandViews), and the degree table's rows as text (judge.ts).
// The band area is checked against an independent computation: the area the path encloses
// (shoelace formula over its vertices) equals the trapezoid-rule integral of the band's width.
// The degree-table numbers are the Python side's (select_degree); here only their display.
import { describe, expect, it } from "vitest";
import { areaFromPixels } from "../curve";
import { bandViews, bandsDrawn, degreeCaption, degreeLabel, degreeRows, degreeSuggestion } from "../judge";
import type { BandsJson, DegreeTableJson } from "../state";

/** Sub-paths of an area path as vertex lists (M/L commands, closed by Z). */
function polygons(d: string): [number, number][][] {
  return d
    .split("Z")
    .filter((s) => s.length > 0)
    .map((s) =>
      [...s.matchAll(/[ML](-?[\d.]+),(-?[\d.]+)/g)].map((m) => [Number(m[1]), Number(m[2])] as [number, number]),
    );
}

function shoelace(poly: [number, number][]): number {
  let a = 0;
  for (let i = 0; i < poly.length; i++) {
    const [x0, y0] = poly[i]!;
    const [x1, y1] = poly[(i + 1) % poly.length]!;
    a += x0 * y1 - x1 * y0;
  }
  return Math.abs(a) / 2;
}

describe("areaFromPixels", () => {
  it("encloses the band: polygon area equals the integral of its width", () => {
    const n = 50;
    const px = Float64Array.from({ length: n }, (_, i) => 10 + 4 * i);
    const mid = Float64Array.from(px, (x) => 200 - 0.02 * (x - 100) ** 2);
    const half = Float64Array.from(px, (x) => 5 + 0.05 * x);
    const hi = Float64Array.from(mid, (m, i) => m - half[i]!); // pixels: y grows downwards
    const lo = Float64Array.from(mid, (m, i) => m + half[i]!);
    const d = areaFromPixels(px, lo, hi);
    const polys = polygons(d);
    expect(polys).toHaveLength(1);
    expect(polys[0]).toHaveLength(2 * n);
    let trapezoid = 0;
    for (let i = 1; i < n; i++) trapezoid += ((px[i]! - px[i - 1]!) * (2 * half[i]! + 2 * half[i - 1]!)) / 2;
    // Vertices are written with 2 decimals: allow that rounding.
    expect(shoelace(polys[0]!)).toBeCloseTo(trapezoid, 0);
    expect(Math.abs(shoelace(polys[0]!) - trapezoid) / trapezoid).toBeLessThan(1e-3);
  });

  it("breaks where a bound is not finite and drops single-point runs", () => {
    const px = [0, 1, 2, 3, 4, 5, 6];
    const lo = [10, 10, NaN, 10, 10, 10, NaN];
    const hi = [5, 5, 5, 5, Infinity, 5, 5];
    // Runs: [0, 1] (two points), [3] (one point: no area), [5] (one point).
    const d = areaFromPixels(px, lo, hi);
    expect(polygons(d)).toEqual([
      [
        [0, 5],
        [1, 5],
        [1, 10],
        [0, 10],
      ],
    ]);
    expect(areaFromPixels([], [], [])).toBe("");
  });

  it("clamps far-off pixels so the path stays valid", () => {
    const d = areaFromPixels([0, 1], [1e9, 1e9], [-1e9, -1e9]);
    expect(d).toBe("M0.00,-100000.00L1.00,-100000.00L1.00,100000.00L0.00,100000.00Z");
  });
});

const bands: BandsJson = {
  model_name: "polynomial_2",
  level: 0.95,
  x: [1, 2, 3],
  confidence: { lower: [0, null, 2], upper: [1, 2, 3] },
  prediction: { lower: [-1, 0, 1], upper: [2, 3, 4] },
  note: "",
};

describe("bandViews", () => {
  it("draws only the toggled bands of the model shown", () => {
    const both = bandViews(bands, "polynomial_2", true, true);
    expect(Array.from(both.confidence!.lower)).toEqual([0, NaN, 2]);
    expect(Array.from(both.prediction!.upper)).toEqual([2, 3, 4]);
    expect(bandsDrawn(both)).toBe("confidence prediction");
    // A toggle switched off hides its band before Python answers.
    const conf = bandViews(bands, "polynomial_2", true, false);
    expect(conf.prediction).toBeNull();
    expect(bandsDrawn(conf)).toBe("confidence");
    // Bands of another model's fit (a switch in flight) are not drawn over this model.
    expect(bandsDrawn(bandViews(bands, "straight_line", true, true))).toBe("");
    expect(bandsDrawn(bandViews(null, "polynomial_2", true, true))).toBe("");
    // A band Python could not compute is null: nothing drawn.
    const none = { ...bands, confidence: null, note: "No bands: ..." };
    expect(bandViews(none, "polynomial_2", true, false).confidence).toBeNull();
  });
});

const table: DegreeTableJson = {
  current: 1,
  suggested: 2,
  alpha: 0.05,
  max_degree: 4,
  n: 28,
  weighting: "none",
  reasoning: "…",
  warnings: [],
  rows: [
    { degree: 1, F: 58.6341, df_num: 1, df_den: 26, p: 1.2e-8, aicc: -12.5, bic: -15.7, r2: 0.6768, r2_adj: 0.66, ssr: 12.6 },
    { degree: 2, F: 420.765, df_num: 1, df_den: 25, p: 5.36e-18, aicc: -100.58, bic: -96.58, r2: 0.98051, r2_adj: 0.979, ssr: 0.76 },
    { degree: 3, F: 0.198485, df_num: 1, df_den: 24, p: 0.66, aicc: -98.1, bic: -93.4, r2: 0.98066, r2_adj: 0.978, ssr: 0.75 },
    { degree: 4, F: null, df_num: 1, df_den: 23, p: 0, aicc: null, bic: -97.0, r2: 1, r2_adj: 1, ssr: 0 },
  ],
};

describe("degree table", () => {
  it("formats each row and marks suggested, current, significance and the lowest criteria", () => {
    const rows = degreeRows(table);
    expect(rows.map((r) => r.degree)).toEqual([1, 2, 3, 4]);
    expect(rows[0]!.current).toBe(true);
    expect(rows.filter((r) => r.suggested).map((r) => r.degree)).toEqual([2]);
    expect(rows.map((r) => r.significant)).toEqual([true, true, false, true]);
    expect(rows[1]!.cells).toEqual(["420.8", "1, 25", "5.36e-18", "-100.58 (lowest)", "-96.58", "0.9805"]);
    // BIC is lowest at degree 4 here; an infinite F (a perfect fit) reads "inf".
    expect(rows[3]!.cells[0]).toBe("inf");
    expect(rows[3]!.cells[4]).toBe("-97 (lowest)");
    expect(rows[3]!.cells[3]).toBe("");
  });

  it("says what was tested and what is suggested, or why there is no table", () => {
    expect(degreeCaption(table)).toContain("α = 0.05");
    expect(degreeCaption(table)).toContain("28 included points");
    expect(degreeCaption({ ...table, weighting: "sigma" })).toContain("weighted as the fit is (sigma)");
    expect(degreeSuggestion(table)).toBe("Suggested degree: 2 (quadratic).");
    expect(degreeSuggestion({ ...table, current: 2 })).toContain("the model shown");
    expect(degreeSuggestion({ ...table, suggested: 0 })).toContain("constant (degree 0)");
    const err: DegreeTableJson = { current: 1, error: "max_degree=1 needs at least 3 points" };
    expect(degreeRows(err)).toEqual([]);
    expect(degreeSuggestion(err)).toBe("No degree table: max_degree=1 needs at least 3 points");
    expect(degreeLabel(1)).toBe("1 (straight line)");
    expect(degreeLabel(7)).toBe("7");
  });
});

describe("degree table on large data", () => {
  it("waits to be asked for and says why", () => {
    const t: DegreeTableJson = { current: 2, deferred: true, n: 100000 };
    expect(degreeRows(t)).toEqual([]);
    expect(degreeCaption(t)).toBe("Polynomial degree");
    expect(degreeSuggestion(t)).toBe(
      "The degree table fits every degree to all 100,000 included points; it is computed when asked for.",
    );
  });
});
