// Round trips of the handle and pin solvers: move a feature to a target, read its position back,
// and check the curve itself against closed-form values of the model.
import { describe, expect, it } from "vitest";
import type { ExprNode } from "../expr";
import { evalCurve } from "../expr";
import {
  type HandleSpec,
  type SolveOptions,
  SolveError,
  handlePosition,
  levenbergMarquardt,
  solveHandle,
  solvePins,
} from "../handles";

const num = (value: number): ExprNode => ({ type: "num", value });
const name = (id: string): ExprNode => ({ type: "name", id });
const bin = (op: "+" | "-" | "*" | "/" | "**", left: ExprNode, right: ExprNode): ExprNode => ({
  type: "bin",
  op,
  left,
  right,
});
const call = (fn: "exp" | "log" | "log10", arg: ExprNode): ExprNode => ({ type: "call", fn, args: [arg] });

// Four-parameter logistic for stimulation, zero_dose + (full_effect - zero_dose) / (1 + (ec50 / x) **
// n_h): the Hill-type dose-response form (common practice); at x = ec50 the response is halfway,
// (full_effect + zero_dose) / 2.
const logistic4 = bin(
  "+",
  name("zero_dose"),
  bin(
    "/",
    bin("-", name("full_effect"), name("zero_dose")),
    bin("+", num(1), bin("**", bin("/", name("ec50"), name("x")), name("n_h"))),
  ),
);
const midpointOnlyEc50: HandleSpec = {
  name: "midpoint",
  label: "Midpoint",
  x: name("ec50"),
  y: bin("/", bin("+", name("full_effect"), name("zero_dose")), num(2)),
  moves: ["ec50"],
};
const midpointFree: HandleSpec = { ...midpointOnlyEc50, moves: ["ec50", "zero_dose", "full_effect"] };

// Exponential decay to a baseline, baseline + (y0 - baseline) * exp(-k x) (common practice); the
// half-life is ln 2 / k, where the curve has fallen halfway from y0 to the baseline.
const decay = bin(
  "+",
  name("baseline"),
  bin(
    "*",
    bin("-", name("y0"), name("baseline")),
    call("exp", { type: "neg", arg: bin("*", name("k"), name("x")) }),
  ),
);
const halfLife: HandleSpec = {
  name: "half_life",
  label: "Half-life",
  x: bin("/", call("log", num(2)), name("k")),
  y: bin("+", name("baseline"), bin("/", bin("-", name("y0"), name("baseline")), num(2))),
  moves: ["k"],
};

const linearOpts: SolveOptions = { xLog: false, yLog: false, bounds: {}, logParams: new Set() };

function relClose(a: number, b: number, rel: number): boolean {
  return Math.abs(a - b) <= rel * Math.max(Math.abs(a), Math.abs(b), 1e-300);
}

describe("solveHandle", () => {
  const dose = { zero_dose: 5, full_effect: 95, ec50: 1e-6, n_h: 1.2 };
  const logOpts: SolveOptions = {
    xLog: true,
    yLog: false,
    bounds: { ec50: [1e-12, 1], zero_dose: [-1000, 1000], full_effect: [-1000, 1000] },
    logParams: new Set(["ec50"]),
    span: { x: 6, y: 100 },
  };

  it("moves a logistic midpoint on a log x axis and reads the target back", () => {
    const target = { x: 3.2e-8, y: 50 }; // y unchanged: ec50 alone can reach it
    const res = solveHandle(midpointOnlyEc50, dose, target, logOpts);
    expect(res.converged).toBe(true);
    expect(res.reached).toBe(true);
    expect(res.clamped).toBe(false);
    const pos = handlePosition(midpointOnlyEc50, res.params);
    expect(relClose(pos.x, target.x, 1e-9)).toBe(true);
    expect(pos.y).toBe(50);
    // Only the moved parameter changed.
    expect(res.params["n_h"]).toBe(1.2);
    expect(res.params["full_effect"]).toBe(95);
    // The curve is halfway at its new EC50 (the model's definition, not the handle's).
    const y = evalCurve(logistic4, res.params, Float64Array.of(res.params["ec50"]!));
    expect(y[0]).toBeCloseTo(50, 10);
  });

  it("reaches a 2-D target when the midpoint also moves the two levels", () => {
    const target = { x: 4e-5, y: 62.5 };
    const res = solveHandle(midpointFree, dose, target, logOpts);
    expect(res.reached).toBe(true);
    const pos = handlePosition(midpointFree, res.params);
    expect(relClose(pos.x, target.x, 1e-9)).toBe(true);
    expect(Math.abs(pos.y - target.y)).toBeLessThan(1e-6);
    const y = evalCurve(logistic4, res.params, Float64Array.of(res.params["ec50"]!));
    expect(y[0]).toBeCloseTo(62.5, 6);
  });

  it("ends at the closest point when the target is out of reach vertically", () => {
    // ec50 alone cannot change the midpoint's height: x is matched, y stays at 50.
    const res = solveHandle(midpointOnlyEc50, dose, { x: 1e-7, y: 80 }, logOpts);
    expect(res.converged).toBe(true);
    expect(res.reached).toBe(false);
    expect(relClose(res.params["ec50"]!, 1e-7, 1e-9)).toBe(true);
    expect(res.distance).toBeCloseTo(30 / 100, 9);
  });

  it("moves a half-life handle: k = ln 2 / t_half", () => {
    const start = { y0: 100, baseline: 10, k: 0.2 };
    const opts: SolveOptions = {
      xLog: false,
      yLog: false,
      bounds: { k: [0, Infinity] },
      logParams: new Set(["k"]),
      span: { x: 20, y: 100 },
    };
    const target = { x: 7.5, y: 55 };
    const res = solveHandle(halfLife, start, target, opts);
    expect(res.reached).toBe(true);
    expect(relClose(res.params["k"]!, Math.LN2 / 7.5, 1e-9)).toBe(true);
    const pos = handlePosition(halfLife, res.params);
    expect(relClose(pos.x, 7.5, 1e-9)).toBe(true);
    // At one half-life the decay has covered half the distance to the baseline.
    const y = evalCurve(decay, res.params, Float64Array.of(7.5));
    expect(y[0]).toBeCloseTo(55, 7); // the solver stops within 1e-10 of the 20-wide view
  });

  it("stops at a bound and says so", () => {
    const start = { y0: 100, baseline: 10, k: 0.2 };
    const opts: SolveOptions = {
      xLog: false,
      yLog: false,
      bounds: { k: [0.1, 1] }, // half-life at most ln 2 / 0.1 = 6.93
      logParams: new Set(["k"]),
      span: { x: 20, y: 100 },
    };
    const res = solveHandle(halfLife, start, { x: 15, y: 55 }, opts);
    expect(res.clamped).toBe(true);
    expect(res.clampedParams).toEqual(["k"]);
    expect(res.reached).toBe(false);
    expect(res.params["k"]).toBeCloseTo(0.1, 12);
    expect(handlePosition(halfLife, res.params).x).toBeCloseTo(Math.LN2 / 0.1, 9);
  });

  it("leaves fixed parameters alone", () => {
    const res = solveHandle(midpointFree, dose, { x: 1e-7, y: 70 }, {
      ...logOpts,
      fixed: new Set(["full_effect", "zero_dose"]),
    });
    expect(res.params["full_effect"]).toBe(95);
    expect(res.params["zero_dose"]).toBe(5);
    expect(relClose(res.params["ec50"]!, 1e-7, 1e-9)).toBe(true);
  });

  it("rejects a target it cannot use", () => {
    expect(() => solveHandle(midpointOnlyEc50, dose, { x: -1, y: 50 }, logOpts)).toThrowError(SolveError);
    expect(() => solveHandle(midpointOnlyEc50, dose, { x: -1, y: 50 }, logOpts)).toThrowError(
      /x must be > 0 on a log x axis/,
    );
    expect(() => solveHandle(midpointOnlyEc50, dose, { x: NaN, y: 50 }, logOpts)).toThrowError(
      /finite x and y/,
    );
    const bad: HandleSpec = { ...midpointOnlyEc50, moves: ["slope"] };
    expect(() => solveHandle(bad, dose, { x: 1e-6, y: 50 }, logOpts)).toThrowError(
      /moves unknown parameter "slope"/,
    );
  });
});

describe("solvePins", () => {
  // Michaelis-Menten v = vmax s / (km + s) (common practice). Through (1, 2) and (4, 4):
  // 2 = V / (K + 1) and 4 = 4 V / (K + 4) give V = 2K + 2 = K + 4, so K = 2, V = 6 (solved by hand).
  const mm = bin("/", bin("*", name("vmax"), name("x")), bin("+", name("km"), name("x")));

  it("passes the curve through two pins", () => {
    const pins = [
      { x: 1, y: 2 },
      { x: 4, y: 4 },
    ];
    const res = solvePins(mm, { vmax: 3, km: 0.5 }, ["vmax", "km"], pins, {
      ...linearOpts,
      bounds: { vmax: [0, Infinity], km: [0, Infinity] },
      logParams: new Set(["vmax", "km"]),
    });
    expect(res.reached).toBe(true);
    expect(res.params["km"]).toBeCloseTo(2, 9);
    expect(res.params["vmax"]).toBeCloseTo(6, 9);
    const y = evalCurve(mm, res.params, Float64Array.of(1, 4));
    expect(y[0]).toBeCloseTo(2, 9);
    expect(y[1]).toBeCloseTo(4, 9);
  });

  it("solves pins on a log y axis", () => {
    // y = a * exp(b x) through (0, 3) and (2, 300): a = 3, b = ln(100) / 2 (by hand).
    const expo = bin("*", name("a"), call("exp", bin("*", name("b"), name("x"))));
    const res = solvePins(expo, { a: 1, b: 0.1 }, ["a", "b"], [
      { x: 0, y: 3 },
      { x: 2, y: 300 },
    ], { ...linearOpts, yLog: true, logParams: new Set(["a"]) });
    expect(res.reached).toBe(true);
    expect(res.params["a"]).toBeCloseTo(3, 9);
    expect(res.params["b"]).toBeCloseTo(Math.log(100) / 2, 9);
  });

  it("gives the least-squares compromise for more pins than unknowns", () => {
    // A constant through 1, 2, 6: the least-squares level is their mean, 3.
    const res = solvePins(name("c"), { c: 0 }, ["c"], [
      { x: 0, y: 1 },
      { x: 1, y: 2 },
      { x: 2, y: 6 },
    ], linearOpts);
    expect(res.converged).toBe(true);
    expect(res.reached).toBe(false);
    expect(res.params["c"]).toBeCloseTo(3, 9);
  });
});

describe("levenbergMarquardt", () => {
  it("finds the Rosenbrock minimum at (1, 1) (a classic test problem)", () => {
    // Rosenbrock as residuals r = (10 (u1 - u0^2), 1 - u0), minimum 0 at (1, 1); start (-1.2, 1)
    // is the standard one (More, Garbow and Hillstrom 1981, problem 1; from memory).
    const res = levenbergMarquardt(
      {
        n: 2,
        m: 2,
        lower: Float64Array.of(-Infinity, -Infinity),
        upper: Float64Array.of(Infinity, Infinity),
        residuals: (u, out) => {
          out[0] = 10 * (u[1]! - u[0]! * u[0]!);
          out[1] = 1 - u[0]!;
        },
      },
      Float64Array.of(-1.2, 1),
      { costTol: 1e-24, maxIter: 200 },
    );
    expect(res.converged).toBe(true);
    expect(res.u[0]).toBeCloseTo(1, 8);
    expect(res.u[1]).toBeCloseTo(1, 8);
  });
});
