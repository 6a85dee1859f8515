// The widget's interaction logic (interact.ts), curve sampling and paths (curve.ts) and tick
// labels: drags and pins checked against closed-form facts of the models, the throttle on a
// fake clock, labels against the accessibility contract in widget.ts.
import { describe, expect, it } from "vitest";
import { pathFromPixels, sampleAxis } from "../curve";
import type { ExprNode } from "../expr";
import { evalCurve } from "../expr";
import {
  type Clock,
  MAX_PINS,
  curveAt,
  dataRange,
  dragNote,
  formatRows,
  freeParams,
  handleAriaLabel,
  handleViews,
  parseRows,
  pinViews,
  pinsOnCurve,
  placePins,
  solveDrag,
  solveOptions,
  throttle,
  usesPins,
  withValues,
} from "../interact";
import { defaultRecord } from "../params";
import type { ModelJson, ParamRecord } from "../state";
import { tickLabel } from "../validate";

const num = (value: number): ExprNode => ({ type: "num", value });
const name = (id: string): ExprNode => ({ type: "name", id });
const bin = (op: "+" | "-" | "*" | "/" | "**", left: ExprNode, right: ExprNode): ExprNode => ({
  type: "bin",
  op,
  left,
  right,
});

// Inhibition 4PL with the midpoint in log10 units (common practice):
// full_effect + (zero_dose - full_effect) / (1 + (x / 10**log_ic50)**n_h); at x = IC50 the response
// is halfway.
const ic50 = bin("**", num(10), name("log_ic50"));
const fourPL = bin(
  "+",
  name("full_effect"),
  bin("/", bin("-", name("zero_dose"), name("full_effect")), bin("+", num(1), bin("**", bin("/", name("x"), ic50), name("n_h")))),
);
const param = (n: string, value: number, extra: Partial<ModelJson["params"][number]> = {}) => ({
  name: n,
  value,
  lower: null,
  upper: null,
  log_scale: false,
  positive: false,
  unit: "",
  description: "",
  ...extra,
});
const dose: ModelJson = {
  name: "inhibition_4pl",
  formula: null,
  tree: fourPL,
  domain: "x>=0",
  has_preview: true,
  params: [param("full_effect", 5), param("zero_dose", 95), param("log_ic50", -6), param("n_h", 1, { lower: 0, positive: true, log_scale: true })],
  handles: [
    { name: "midpoint", label: "IC50", x: ic50, y: bin("/", bin("+", name("zero_dose"), name("full_effect")), num(2)), moves: ["log_ic50"] },
    { name: "zero_dose", label: "zero-dose level", x: num(1e-9), y: name("zero_dose"), moves: ["zero_dose"] },
  ],
};
const settings = (over: Record<string, Partial<ParamRecord>> = {}): Record<string, ParamRecord> => {
  const out: Record<string, ParamRecord> = {};
  for (const p of dose.params) out[p.name] = { ...defaultRecord(p), ...over[p.name] };
  return out;
};
const values = { full_effect: 5, zero_dose: 95, log_ic50: -6, n_h: 1 };

// A quadratic without declared handles: dragged through generic pins.
const quad: ModelJson = {
  name: "polynomial_2",
  formula: null,
  tree: bin("+", name("c0"), bin("+", bin("*", name("c1"), name("x")), bin("*", name("c2"), bin("**", name("x"), num(2))))),
  domain: "all",
  has_preview: true,
  params: [param("c0", 0), param("c1", 0), param("c2", 0)],
  handles: [],
};

describe("handles and their accessible names", () => {
  it("names the feature and what it moves, fixed ones said so", () => {
    expect(handleAriaLabel("IC50", ["log_ic50"], new Set())).toBe("IC50: moves log_ic50");
    expect(handleAriaLabel("corner", ["a", "b"], new Set(["b"]))).toBe("corner: moves a (b fixed)");
    expect(handleAriaLabel("zero_dose", ["zero_dose"], new Set(["zero_dose"]))).toBe("zero_dose: moves nothing (zero_dose fixed)");
  });

  it("places a handle where its trees say and reports the moved parameter as its value", () => {
    const views = handleViews(dose, values, new Set());
    const mid = views.find((v) => v.key === "midpoint")!;
    expect(mid.pos.x).toBeCloseTo(1e-6, 18);
    expect(mid.pos.y).toBe(50);
    expect(mid.valueNow).toBe(-6);
    expect(mid.valueText).toBe("log_ic50 = -6");
    expect(mid.pin).toBe(false);
  });

  it("knows which models use pins and which parameters are free", () => {
    expect(usesPins(dose)).toBe(false);
    expect(usesPins(quad)).toBe(true);
    expect(usesPins({ ...quad, tree: null })).toBe(false); // a callable: no preview in the page
    expect(freeParams(dose, settings({ zero_dose: { fixed: true } }))).toEqual(["full_effect", "log_ic50", "n_h"]);
  });
});

describe("dragging", () => {
  const span = { x: 6, y: 100 };

  it("moves the midpoint to the dropped concentration: IC50 follows (half-way point of a 4PL)", () => {
    const opts = solveOptions(dose, settings(), true, false, span);
    const res = solveDrag(dose, "midpoint", values, { x: 3e-7, y: 50 }, [], opts)!;
    expect(res.reached).toBe(true);
    expect(10 ** res.params["log_ic50"]!).toBeCloseTo(3e-7, 12);
    // The curve at the new IC50 is half-way between the two levels (closed form).
    // solveOptions stops at a screen-normalised distance of 1e-9, here 1e-7 in y (span 100).
    const y = evalCurve(fourPL, res.params, [3e-7])[0]!;
    expect(Math.abs(y - 50)).toBeLessThan(1e-6);
    expect(res.params["zero_dose"]).toBe(95); // only what the handle moves changes
  });

  it("leaves a fixed parameter alone and says so", () => {
    const opts = solveOptions(dose, settings({ log_ic50: { fixed: true } }), true, false, span);
    const res = solveDrag(dose, "midpoint", values, { x: 3e-7, y: 50 }, [], opts)!;
    expect(res.params["log_ic50"]).toBe(-6);
    expect(dragNote(res)).toMatch(/fixed/);
  });

  it("stops at a bound and names it", () => {
    const opts = solveOptions(dose, settings({ zero_dose: { upper: 100 } }), true, false, span);
    const res = solveDrag(dose, "zero_dose", values, { x: 1e-9, y: 130 }, [], opts)!;
    expect(res.params["zero_dose"]).toBe(100);
    expect(dragNote(res)).toBe("stopped at a bound of zero_dose");
  });

  it("solves pins: the quadratic through three points (Lagrange interpolation)", () => {
    const pins = placePins(quad.tree, { c0: 0, c1: 0, c2: 0 }, 3, [0, 3], false);
    expect(pins.map((p) => p.x)).toEqual([0.5, 1.5, 2.5]);
    const opts = solveOptions(quad, { c0: { value: 0, lower: null, upper: null, fixed: false }, c1: { value: 0, lower: null, upper: null, fixed: false }, c2: { value: 0, lower: null, upper: null, fixed: false } }, false, false, { x: 3, y: 10 });
    // Drag the middle pin to y = 2 with the others at 0: the unique parabola through
    // (0.5, 0), (1.5, 2), (2.5, 0) is 2 - 2 (x - 1.5)^2 = -2.5 + 6x - 2x^2.
    const res = solveDrag(quad, "pin:1", { c0: 0, c1: 0, c2: 0 }, { x: 1.5, y: 2 }, pins, opts)!;
    // Solver tolerance 1e-9 of the y span (10): coefficients agree to about 1e-7.
    expect(res.params["c0"]).toBeCloseTo(-2.5, 6);
    expect(res.params["c1"]).toBeCloseTo(6, 6);
    expect(res.params["c2"]).toBeCloseTo(-2, 6);
  });

  it("returns null for a key it does not know", () => {
    const opts = solveOptions(dose, settings(), true, false, span);
    expect(solveDrag(dose, "nope", values, { x: 1, y: 1 }, [], opts)).toBeNull();
    expect(solveDrag(quad, "pin:7", values, { x: 1, y: 1 }, [], opts)).toBeNull();
  });
});

describe("pins", () => {
  it("spreads one pin per free parameter evenly in decades on a log axis, capped", () => {
    const pins = placePins(fourPL, values, 4, [1e-9, 1e-5], true);
    expect(pins.map((p) => Math.log10(p.x))).toEqual(
      [-8.5, -7.5, -6.5, -5.5].map((v) => expect.closeTo(v, 12) as unknown as number),
    );
    expect(placePins(fourPL, values, 9, [1e-9, 1e-5], true)).toHaveLength(MAX_PINS);
    // Each pin sits on the curve.
    for (const p of pins) expect(p.y).toBe(evalCurve(fourPL, values, [p.x])[0]);
  });

  it("moves pins onto a new curve vertically and labels them", () => {
    const moved = pinsOnCurve(quad.tree, { c0: 1, c1: 0, c2: 0 }, [{ x: 2, y: 9 }]);
    expect(moved).toEqual([{ x: 2, y: 1 }]);
    const [v] = pinViews(moved, ["c0", "c1"]);
    expect(v!.key).toBe("pin:0");
    expect(v!.ariaLabel).toBe("curve point 1 of 1: moves c0, c1");
    expect(v!.valueNow).toBe(1);
  });

  it("finds the data range, positive values only on a log axis", () => {
    expect(dataRange([0, 3, -1, NaN, 7], false)).toEqual([-1, 7]);
    expect(dataRange([0, 3, -1, NaN, 7], true)).toEqual([3, 7]);
    expect(dataRange([0, -1], true)).toBeNull();
  });
});

describe("withValues", () => {
  it("replaces values inside the bounds, keeps fixed ones and the bounds", () => {
    const s = settings({ n_h: { upper: 4 }, zero_dose: { fixed: true } });
    const out = withValues(s, { n_h: 9, zero_dose: 10, full_effect: -2, log_ic50: NaN });
    expect(out["n_h"]).toEqual({ ...defaultRecord(dose.params[3]!), value: 4, lower: 0, upper: 4, fixed: false });
    expect(out["zero_dose"]!.value).toBe(95);
    expect(out["full_effect"]!.value).toBe(-2);
    expect(out["log_ic50"]!.value).toBe(-6);
    expect(s["n_h"]!.value).toBe(1); // the input is not changed
  });
});

describe("throttle", () => {
  function fakeClock(): Clock & { t: number; advance(ms: number): void } {
    const timers: { at: number; fn: () => void; id: number }[] = [];
    let next = 1;
    const c = {
      t: 0,
      now: () => c.t,
      setTimeout: (fn: () => void, ms: number) => {
        const id = next++;
        timers.push({ at: c.t + ms, fn, id });
        return id;
      },
      clearTimeout: (id: unknown) => {
        const i = timers.findIndex((x) => x.id === id);
        if (i >= 0) timers.splice(i, 1);
      },
      advance(ms: number) {
        c.t += ms;
        for (;;) {
          timers.sort((a, b) => a.at - b.at);
          const first = timers[0];
          if (!first || first.at > c.t) break;
          timers.shift();
          first.fn();
        }
      },
    };
    return c;
  }

  it("sends the first call at once, merges the rest and always sends the last", () => {
    const clock = fakeClock();
    const got: number[] = [];
    const t = throttle((v: number) => got.push(v), 100, clock);
    t.call(1);
    t.call(2);
    t.call(3);
    expect(got).toEqual([1]);
    clock.advance(99);
    expect(got).toEqual([1]);
    clock.advance(1);
    expect(got).toEqual([1, 3]);
    clock.advance(500);
    t.call(4);
    expect(got).toEqual([1, 3, 4]);
    t.call(5);
    t.cancel();
    clock.advance(1000);
    expect(got).toEqual([1, 3, 4]);
  });
});

describe("curve sampling and paths", () => {
  it("samples evenly in decades on a log axis, including both ends", () => {
    const xs = sampleAxis(1e-9, 1e-3, true, 7);
    expect(Array.from(xs, (v) => Math.log10(v))).toEqual([-9, -8, -7, -6, -5, -4, -3].map((v) => expect.closeTo(v, 12) as unknown as number));
    expect(Array.from(sampleAxis(0, 1, false, 5))).toEqual([0, 0.25, 0.5, 0.75, 1]);
  });

  it("breaks the path where the curve is undefined and clamps far values", () => {
    expect(pathFromPixels([0, 1, 2, 3, 4], [0, 1, NaN, 3, 1e9])).toBe("M0.00,0.00L1.00,1.00M3.00,3.00L4.00,100000.00");
    expect(pathFromPixels([], [])).toBe("");
  });
});

describe("tick labels", () => {
  it("uses plain decimals in the middle range and exponents outside, never SI prefixes", () => {
    expect(tickLabel(100)).toBe("100");
    expect(tickLabel(0.1 + 0.2)).toBe("0.3");
    expect(tickLabel(1e-9)).toBe("1e-9");
    expect(tickLabel(2.5e6)).toBe("2.5e+6");
    expect(tickLabel(-0.001)).toBe("-0.001");
    expect(tickLabel(0)).toBe("0");
    expect(tickLabel(NaN)).toBe("");
  });
});

describe("excluded rows as text", () => {
  it("reads numbers and ranges, rejects what is not a row", () => {
    expect(parseRows("3, 7 10-12;1", 20)).toEqual({ ok: true, rows: [1, 3, 7, 10, 11, 12] });
    expect(parseRows("  ", 20)).toEqual({ ok: true, rows: [] });
    expect(parseRows("3, x", 20)).toEqual({ ok: false, message: '"x" is not a row number or a range like 3-7' });
    expect(parseRows("9-4", 20)).toMatchObject({ ok: false, message: "range 9-4 runs backwards" });
    expect(parseRows("20", 20)).toMatchObject({ ok: false, message: "row 20 does not exist (rows are 0 to 19)" });
    expect(parseRows("-1", 20)).toMatchObject({ ok: false });
  });

  it("writes runs of three or more as ranges and reads its own text back", () => {
    const rows = [12, 1, 4, 5, 6, 7, 9, 10];
    const text = formatRows(rows);
    expect(text).toBe("1, 4-7, 9, 10, 12");
    expect(parseRows(text, 13)).toEqual({ ok: true, rows: [...rows].sort((a, b) => a - b) });
    expect(formatRows([])).toBe("");
  });
});

describe("curveAt", () => {
  it("interpolates a sampled curve linearly on the axis", () => {
    // y = 2 + 3 log10(x) is a straight line in log10 x: exact between samples on a log axis.
    const xs = [1e-3, 1e-2, 1e-1, 1];
    const s = { x: xs, y: xs.map((v) => 2 + 3 * Math.log10(v)) };
    expect(curveAt(s, 10 ** -1.5, true)).toBeCloseTo(2 - 4.5, 12);
    expect(curveAt({ x: [0, 2], y: [1, 5] }, 0.5, false)).toBe(2);
    expect(curveAt({ x: [0, 2], y: [1, null] }, 0.5, false)).toBeNaN();
    expect(curveAt(s, 5, true)).toBeNaN();
    expect(curveAt(null, 1, false)).toBeNaN();
  });
});
