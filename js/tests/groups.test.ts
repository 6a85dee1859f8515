import { describe, expect, it } from "vitest";
import {
  GROUP_COLOURS,
  GROUP_MARKERS,
  type PathSink,
  atFitted,
  groupStyle,
  legendEntries,
  luminance,
  markerSvgPath,
  markerVertices,
  otherCurves,
  pointGroups,
  readGroups,
  traceMarker,
  valuesForGroup,
} from "../groups";
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

describe("markers", () => {
  // Shoelace formula for a polygon's area.
  const area = (v: [number, number][]): number =>
    Math.abs(v.reduce((s, [x0, y0], k) => {
      const [x1, y1] = v[(k + 1) % v.length]!;
      return s + x0 * y1 - x1 * y0;
    }, 0)) / 2;
  it("every polygon is centred and within 30% of the circle's area", () => {
    for (const m of GROUP_MARKERS) {
      const v = markerVertices(m, 3);
      if (v === null) {
        expect(m).toBe("circle");
        continue;
      }
      const cx = v.reduce((s, p) => s + p[0], 0) / v.length;
      const cy = v.reduce((s, p) => s + p[1], 0) / v.length;
      expect(Math.abs(cx)).toBeLessThan(1e-12);
      expect(Math.abs(cy)).toBeLessThan(1e-12);
      const ratio = area(v) / (Math.PI * 9);
      expect(ratio).toBeGreaterThan(0.7);
      expect(ratio).toBeLessThan(1.3);
    }
  });
  it("the triangles point up and down (screen y grows downwards)", () => {
    expect(markerVertices("triangle", 1)![0]![1]).toBeLessThan(0);
    expect(markerVertices("triangle_down", 1)![0]![1]).toBeGreaterThan(0);
  });
  it("traceMarker draws a closed polygon at the point, or an arc for the circle", () => {
    const calls: string[] = [];
    const sink: PathSink = {
      moveTo: (x, y) => calls.push(`M${x.toFixed(2)},${y.toFixed(2)}`),
      lineTo: (x, y) => calls.push(`L${x.toFixed(2)},${y.toFixed(2)}`),
      arc: (x, y, r) => calls.push(`A${x},${y},${r}`),
      closePath: () => calls.push("Z"),
    };
    traceMarker(sink, "square", 10, 20, 2);
    expect(calls[0]!.startsWith("M")).toBe(true);
    expect(calls.filter((c) => c.startsWith("L"))).toHaveLength(3);
    expect(calls.at(-1)).toBe("Z");
    calls.length = 0;
    traceMarker(sink, "circle", 10, 20, 2);
    expect(calls).toEqual(["M12.00,20.00", "A10,20,2"]);
  });
  it("the SVG path has one corner per vertex", () => {
    expect(markerSvgPath("hexagon", 0, 0, 4).split("L")).toHaveLength(6);
    expect(markerSvgPath("circle", 5, 5, 2)).toMatch(/^M3,5a2,2 /);
  });
});

describe("legend and points", () => {
  const g = readGroups({
    by: ["compound"],
    labels: ["a", "b", "c"],
    selected: "b",
    hidden: ["c"],
    excluded: ["a"],
    values: { a: { k: 1 }, b: { k: 2 }, c: { k: 3 } },
    fitted: { a: { k: 1 }, b: { k: 2.5 }, c: { k: 3 } },
    point_group: [0, 0, 1, 2, 2],
  })!;
  it("one entry per group with its look, state and distinct accessible names", () => {
    const e = legendEntries(g);
    expect(e.map((x) => x.label)).toEqual(["a", "b", "c"]);
    expect(e.map((x) => x.selected)).toEqual([false, true, false]);
    expect(e[2]!.hidden && !e[2]!.excluded).toBe(true);
    expect(e[0]!.excluded && !e[0]!.hidden).toBe(true);
    expect(e[1]!.style).toEqual(groupStyle(1));
    expect(e[1]!.selectName).toContain("selected");
    expect(e[0]!.selectName).toContain("left out of the fit");
    const names = e.flatMap((x) => [x.selectName, x.hideName, x.excludeName]);
    expect(new Set(names).size).toBe(names.length);
  });
  it("points of hidden groups get -1, excluded groups are faded", () => {
    const p = pointGroups(g, 5)!;
    expect(Array.from(p.index)).toEqual([0, 0, 1, -1, -1]);
    expect(p.faded).toEqual([true, false, false]);
    expect(pointGroups(g, 4)).toBeNull(); // the trait is for other data: draw plainly
  });
  it("a curve counts as fitted only at its group's fitted values", () => {
    expect(atFitted(g, "a", { k: 1 })).toBe(true);
    expect(atFitted(g, "b", { k: 2 })).toBe(false);
    expect(atFitted(g, "b", { k: 2.5 * (1 + 1e-14) })).toBe(true);
    expect(atFitted({ ...g, fitted: null }, "a", { k: 1 })).toBe(false);
  });
});
