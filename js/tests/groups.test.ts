import { describe, expect, it } from "vitest";
import { GROUP_COLOURS, groupStyle, luminance, otherCurves, readGroups, valuesForGroup } from "../groups";
import type { ParamRecord } from "../params";

const rec = (name: string, value: number, scope: "shared" | "per_group", fixed = false): ParamRecord =>
  ({ name, value, lower: null, upper: null, fixed, link: null, scope }) as unknown as ParamRecord;

describe("group palette", () => {
  it("neighbouring colours differ in lightness (WCAG luminance ratio >= 1.5)", () => {
    for (let i = 0; i + 1 < GROUP_COLOURS.length; i++) {
      const a = luminance(GROUP_COLOURS[i]!);
      const b = luminance(GROUP_COLOURS[i + 1]!);
      expect((Math.max(a, b) + 0.05) / (Math.min(a, b) + 0.05)).toBeGreaterThanOrEqual(1.5);
    }
  });
  it("colour and marker together stay distinct over many groups", () => {
    const seen = new Set<string>();
    for (let i = 0; i < 24; i++) seen.add(JSON.stringify(groupStyle(i)));
    expect(seen.size).toBe(24);
    expect(groupStyle(1).marker).not.toBe(groupStyle(0).marker);
  });
});

describe("group values", () => {
  const groups = readGroups({
    by: ["compound"],
    labels: ["a", "b", "c"],
    selected: "a",
    hidden: ["c"],
    excluded: [],
    values: { a: { k: 1, m: 5 }, b: { k: 2, m: 6 }, c: { k: 3, m: 7 } },
    fitted: null,
    point_group: [0, 1, 2],
  })!;
  const records = { k: rec("k", 1.5, "per_group"), m: rec("m", 9, "shared") };
  it("shared records override a group's own value, per-group ones do not", () => {
    expect(valuesForGroup(groups, "b", records)).toEqual({ k: 2, m: 9 });
  });
  it("other curves leave out the selected and the hidden groups", () => {
    const c = otherCurves(groups, records);
    expect(c.map((g) => g.label)).toEqual(["b"]);
    expect(c[0]!.style).toEqual(groupStyle(1));
  });
  it("readGroups refuses what is not the trait", () => {
    expect(readGroups(null)).toBeNull();
    expect(readGroups({ labels: "x" })).toBeNull();
  });
});
