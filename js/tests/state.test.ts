// Reading the synced traits (state.ts) and checking what a person types (validate.ts). The
// rules for a setting are the one validator's, Python's Parameters.validated
// (src/curvewright/parameters.py): lower <= upper, a free value inside the bounds, no negative
// value or lower bound for a positive parameter (tests/test_parameters.py and
// tests/widget/test_state.py check the Python side against the same rules).
import { describe, expect, it } from "vitest";
import { type DataJson, type ModelJson, boundsOf, readData, toggleRows, valuesOf } from "../state";
import { checkSetting, formatNumber, parseField } from "../validate";

const data: DataJson = {
  x: [0, 1e-9, null, 1e-7],
  y: [100, 90, 80, null],
  row: [0, 2, 3, 5],
  excluded: [2, 5],
  x_label: "conc",
  y_label: "response",
};

describe("readData", () => {
  it("turns nulls into NaN and marks excluded input rows", () => {
    const p = readData(data);
    expect(p.n).toBe(4);
    expect(Array.from(p.x)).toEqual([0, 1e-9, NaN, 1e-7]);
    expect(Array.from(p.y)).toEqual([100, 90, 80, NaN]);
    expect(Array.from(p.row)).toEqual([0, 2, 3, 5]);
    expect(Array.from(p.excluded)).toEqual([0, 1, 0, 1]);
  });

  it("lets the excluded trait win and accepts a boolean mask", () => {
    expect(Array.from(readData(data, [0]).excluded)).toEqual([1, 0, 0, 0]);
    expect(Array.from(readData({ ...data, excluded: [true, false, true, false] }).excluded)).toEqual([1, 0, 1, 0]);
    expect(readData(null).n).toBe(0);
  });
});

describe("toggleRows", () => {
  it("excludes a click, re-includes when every clicked row is already out", () => {
    expect(toggleRows([3], [1])).toEqual([1, 3]);
    expect(toggleRows([1, 3], [1])).toEqual([3]);
    // A box over an excluded and an included point excludes both.
    expect(toggleRows([1], [1, 2])).toEqual([1, 2]);
    expect(toggleRows([1, 2], [2, 1])).toEqual([]);
  });
});

describe("values and bounds", () => {
  const model = {
    params: [
      { name: "a", value: 1 },
      { name: "b", value: 2 },
    ],
  } as unknown as ModelJson;

  it("reads values from the settings, else the model's defaults", () => {
    expect(valuesOf(model, { a: { value: 5, lower: null, upper: null, fixed: false } })).toEqual({ a: 5, b: 2 });
    expect(boundsOf({ value: 1, lower: null, upper: 3, fixed: false })).toEqual([-Infinity, 3]);
  });
});

describe("parseField", () => {
  it("reads numbers, a decimal comma, a unicode minus and infinite bounds", () => {
    expect(parseField(" 2.5e-3 ", "value")).toEqual({ ok: true, value: 0.0025 });
    expect(parseField("0,5", "value")).toEqual({ ok: true, value: 0.5 });
    expect(parseField("\u22123", "value")).toEqual({ ok: true, value: -3 });
    expect(parseField("", "lower")).toEqual({ ok: true, value: null });
    expect(parseField("-inf", "lower")).toEqual({ ok: true, value: null });
    expect(parseField("∞", "upper")).toEqual({ ok: true, value: null });
  });

  it("says what is wrong", () => {
    expect(parseField("abc", "value")).toEqual({ ok: false, message: '"abc" is not a number' });
    expect(parseField("", "value")).toEqual({ ok: false, message: "enter a number" });
    expect(parseField("inf", "value")).toEqual({ ok: false, message: "the value must be finite" });
    expect(parseField("inf", "lower")).toEqual({ ok: false, message: "a lower bound cannot be +inf" });
    expect(parseField("-inf", "upper")).toEqual({ ok: false, message: "an upper bound cannot be -inf" });
    expect(parseField("1e999", "value")).toEqual({ ok: false, message: "1e999 is too large" });
  });
});

describe("checkSetting (the Python side's rules)", () => {
  const free = { name: "zero_dose", positive: false };
  const positive = { name: "n_h", positive: true };
  it("accepts a value inside its bounds", () => {
    expect(checkSetting(free, { value: 1, lower: 0, upper: 2, fixed: false })).toBeNull();
    expect(checkSetting(free, { value: 2, lower: 0, upper: 2, fixed: true })).toBeNull();
    // a fixed value is the user's statement, not a start: not held to the bounds (as in Python)
    expect(checkSetting(free, { value: 5, lower: 0, upper: 2, fixed: true })).toBeNull();
    expect(checkSetting(positive, { value: 0, lower: 0, upper: null, fixed: false })).toBeNull();
  });

  it("rejects crossed bounds, a value outside them and a negative positive parameter", () => {
    expect(checkSetting(free, { value: 1, lower: 3, upper: 2, fixed: false })).toBe("lower bound 3 is above upper bound 2");
    expect(checkSetting(free, { value: 5, lower: 0, upper: 2, fixed: false })).toBe("5 lies outside the bounds [0, 2]");
    expect(checkSetting(positive, { value: -1, lower: null, upper: null, fixed: false })).toBe(
      "n_h is positive: value and lower bound must not be negative",
    );
    expect(checkSetting(free, { value: NaN, lower: null, upper: null, fixed: false })).toBe("the value must be a finite number");
  });
});

describe("formatNumber", () => {
  it("shows six significant digits without trailing zeros", () => {
    expect(formatNumber(2)).toBe("2");
    expect(formatNumber(1.5e-6)).toBe("1.5e-6");
    expect(formatNumber(-6.70146339)).toBe("-6.70146");
    expect(formatNumber(123456789)).toBe("1.23457e+8");
    expect(formatNumber(null)).toBe("");
    expect(formatNumber(Infinity)).toBe("inf");
  });
});
