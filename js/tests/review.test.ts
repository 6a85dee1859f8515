import { describe, expect, it } from "vitest";
import { luminance } from "../groups";
import {
  type Canvas2D,
  type ReviewGroup,
  type ReviewJson,
  STATUS_STYLE,
  cellAt,
  cellOrigin,
  cellScale,
  drawOverview,
  filterGroups,
  filterText,
  readReviewState,
  gridLayout,
  readReview,
  tableRows,
  statusCounts,
} from "../review";

const grp = (label: string, status: ReviewGroup["status"], values: Record<string, number | null> = {}): ReviewGroup => ({
  label,
  status,
  reason: status === "ok" ? "" : "why",
  edited: false,
  note: "",
  x: [1, 10, 100],
  y: [90, 50, 10],
  cx: [1, 10, 100],
  cy: [91, 50, 9],
  values,
});

/** A canvas that records calls, so a test can check what would be drawn. */
class Recorder implements Canvas2D {
  fillStyle = "";
  strokeStyle = "";
  lineWidth = 1;
  globalAlpha = 1;
  font = "";
  calls: { op: string; args: unknown[]; stroke: string; fill: string }[] = [];
  private rec(op: string, ...args: unknown[]): void {
    this.calls.push({ op, args, stroke: this.strokeStyle, fill: this.fillStyle });
  }
  setLineDash(s: number[]): void {
    this.rec("dash", s);
  }
  beginPath(): void {
    this.rec("begin");
  }
  moveTo(x: number, y: number): void {
    this.rec("moveTo", x, y);
  }
  lineTo(x: number, y: number): void {
    this.rec("lineTo", x, y);
  }
  rect(x: number, y: number, w: number, h: number): void {
    this.rec("rect", x, y, w, h);
  }
  fillRect(x: number, y: number, w: number, h: number): void {
    this.rec("fillRect", x, y, w, h);
  }
  clearRect(x: number, y: number, w: number, h: number): void {
    this.rec("clearRect", x, y, w, h);
  }
  stroke(): void {
    this.rec("stroke");
  }
  fill(): void {
    this.rec("fill");
  }
  fillText(t: string, x: number, y: number): void {
    this.rec("fillText", t, x, y);
  }
  save(): void {
    this.rec("save");
  }
  restore(): void {
    this.rec("restore");
  }
}

describe("reading the review trait", () => {
  it("keeps well-formed groups and maps non-numbers to NaN or null", () => {
    const r = readReview({
      columns: ["ic50"],
      log_x: true,
      groups: [{ label: "A1", status: "flagged", reason: "at bound", x: [1, "bad"], y: [2, 3], cx: [1], cy: [null], values: { ic50: 2, n_h: "x" } }],
    });
    expect(r).not.toBeNull();
    expect(r!.log_x).toBe(true);
    expect(r!.groups[0]!.x[1]).toBeNaN();
    expect(r!.groups[0]!.cy[0]).toBeNull();
    expect(r!.groups[0]!.values).toEqual({ ic50: 2, n_h: null });
  });
  it("refuses a malformed trait rather than drawing half of it", () => {
    expect(readReview(null)).toBeNull();
    expect(readReview({ groups: [{ label: "A", status: "great" }] })).toBeNull();
    expect(readReview({ groups: "no" })).toBeNull();
  });
});

describe("filter and counts", () => {
  const gs = [grp("A", "ok"), grp("B", "failed"), grp("C", "flagged"), grp("D", "failed")];
  it("keeps the groups of one status, in order", () => {
    expect(filterGroups(gs, "all")).toEqual([0, 1, 2, 3]);
    expect(filterGroups(gs, "failed")).toEqual([1, 3]);
    expect(filterGroups(gs, "flagged")).toEqual([2]);
  });
  it("counts each status", () => {
    expect(statusCounts(gs)).toEqual({ ok: 1, flagged: 1, failed: 2 });
  });
});

describe("table rows", () => {
  // The order is Python's (CurveBench.review_sort); the page keeps the shown groups in it.
  it("keeps the shown groups in the order sent", () => {
    expect(tableRows([0, 2, 3], [3, 1, 0, 2])).toEqual([3, 0, 2]);
  });
  it("keeps the shown order without an order, or with one of other groups", () => {
    expect(tableRows([0, 2, 3], null)).toEqual([0, 2, 3]);
    expect(tableRows([0, 2, 3], [1, 0])).toEqual([0, 2, 3]);
  });
});

describe("grid layout and hit test", () => {
  it("fits as many columns as the width allows and covers every cell", () => {
    const l = gridLayout(384, 800, 64, 4);
    expect(l.cols).toBe(11); // floor((800 + 4) / 68)
    expect(l.rows).toBe(Math.ceil(384 / 11));
    expect(l.cols * l.cellW + (l.cols - 1) * l.gap).toBeCloseTo(800, 9);
  });
  it("finds the cell under a point and nothing in a gap or past the end", () => {
    const l = gridLayout(5, 300, 64, 4);
    for (let k = 0; k < 5; k++) {
      const o = cellOrigin(k, l);
      expect(cellAt(o.x + 1, o.y + 1, l, 5)).toBe(k);
      expect(cellAt(o.x + l.cellW - 1, o.y + l.cellH - 1, l, 5)).toBe(k);
    }
    const o0 = cellOrigin(0, l);
    expect(cellAt(o0.x + l.cellW + 1, o0.y + 1, l, 5)).toBeNull();
    const last = cellOrigin(5, l);
    expect(cellAt(last.x + 1, last.y + 1, l, 5)).toBeNull();
    expect(cellAt(-1, 3, l, 5)).toBeNull();
  });
});

describe("cell scale", () => {
  it("maps the data range inside the padded cell, log x when asked", () => {
    const g = grp("A", "ok");
    const sc = cellScale(g, 100, 80, true, 4)!;
    expect(sc.sx(1)).toBeCloseTo(4, 9);
    expect(sc.sx(100)).toBeCloseTo(96, 9);
    expect(sc.sx(10)).toBeCloseTo(50, 9);
    for (const y of [...g.y, ...(g.cy as number[])]) {
      expect(sc.sy(y)).toBeGreaterThan(4);
      expect(sc.sy(y)).toBeLessThan(76);
    }
  });
  it("is null for a group with nothing drawable", () => {
    const g = { ...grp("A", "failed"), x: [Number.NaN], y: [Number.NaN], cx: [], cy: [] };
    expect(cellScale(g, 100, 80, false)).toBeNull();
  });
});

describe("drawing the overview", () => {
  const review: ReviewJson = { columns: [], log_x: true, groups: [grp("A", "ok"), grp("B", "failed"), grp("C", "flagged")] };
  it("draws one frame, the points and one curve per shown group, in the status colour", () => {
    const ctx = new Recorder();
    const l = gridLayout(2, 300);
    expect(drawOverview(ctx, review, [1, 2], l)).toBe(2);
    const rects = ctx.calls.filter((c) => c.op === "rect");
    expect(rects.map((c) => c.stroke)).toEqual([STATUS_STYLE.failed.colour, STATUS_STYLE.flagged.colour]);
    expect(ctx.calls.filter((c) => c.op === "fillRect" && c.fill === "#555555")).toHaveLength(6); // 3 points × 2 groups
    // One light plate under each label, drawn before its text.
    expect(ctx.calls.filter((c) => c.op === "fillRect" && c.fill !== "#555555")).toHaveLength(2);
    const texts = ctx.calls.filter((c) => c.op === "fillText").map((c) => c.args[0]);
    expect(texts).toEqual(["B", "C"]);
    const dashes = ctx.calls.filter((c) => c.op === "dash").map((c) => c.args[0] as number[]);
    expect(dashes.some((d) => d.length > 0)).toBe(true); // flagged frames are dashed
  });
  it("breaks the curve where the model is undefined", () => {
    const g = { ...grp("A", "ok"), cx: [1, 3, 10, 30, 100], cy: [90, null, 50, 30, 10] };
    const ctx = new Recorder();
    drawOverview(ctx, { columns: [], log_x: true, groups: [g] }, [0], gridLayout(1, 200));
    expect(ctx.calls.filter((c) => c.op === "moveTo")).toHaveLength(2);
    expect(ctx.calls.filter((c) => c.op === "lineTo")).toHaveLength(2);
  });
});

describe("status colours", () => {
  it("differ in lightness pairwise (WCAG luminance ratio >= 1.5), so they do not rely on hue", () => {
    // WCAG 2 relative luminance; the 1.5 threshold is our own choice for telling small frames apart.
    const cs = Object.values(STATUS_STYLE).map((s) => luminance(s.colour));
    for (let i = 0; i < cs.length; i++) {
      for (let j = i + 1; j < cs.length; j++) {
        const [a, b] = [Math.max(cs[i]!, cs[j]!), Math.min(cs[i]!, cs[j]!)];
        expect((a + 0.05) / (b + 0.05)).toBeGreaterThanOrEqual(1.5);
      }
    }
  });
});

describe("review state, filter labels and sort toggling", () => {
  it("reads the state trait loosely, with defaults for anything missing or unknown", () => {
    expect(readReviewState({ filter: "failed", open: "W5", can_accept: true, accepted: false })).toEqual({
      filter: "failed",
      open: "W5",
      canAccept: true,
      accepted: false,
      sort: { key: "label", ascending: true },
      order: null,
    });
    expect(readReviewState(null)).toEqual({
      filter: "all",
      open: null,
      canAccept: false,
      accepted: false,
      sort: { key: "label", ascending: true },
      order: null,
    });
    expect(readReviewState({ filter: "everything", open: 3, can_accept: "yes" })).toEqual({
      filter: "all",
      open: null,
      canAccept: false,
      accepted: false,
      sort: { key: "label", ascending: true },
      order: null,
    });
  });
  it("keeps an edited group's note and marks it", () => {
    const r = readReview({ columns: [], log_x: false, groups: [{ ...grp("W5", "ok"), edited: true, note: "refitted in review" }] });
    expect(r?.groups[0]?.edited).toBe(true);
    expect(r?.groups[0]?.note).toBe("refitted in review");
    expect(readReview({ groups: [{ ...grp("W1", "ok"), note: 4 }] })?.groups[0]?.note).toBe("");
  });
  it("labels each filter with the number of groups it keeps", () => {
    const gs = [grp("a", "ok"), grp("b", "failed"), grp("c", "failed"), grp("d", "flagged")];
    const n = statusCounts(gs);
    expect(filterText("all", n)).toBe("All (4)");
    expect(filterText("failed", n)).toBe("Failed (2)");
    expect(filterText("flagged", n)).toBe("Flagged (1)");
    // The count on a button is the number of groups its filter shows.
    expect(filterGroups(gs, "failed").length).toBe(2);
  });
  it("reads the sort and the order, with defaults", () => {
    const st = readReviewState({ filter: "failed", sort: { key: "ic50", ascending: false }, order: [2, 0, 1] });
    expect(st.sort).toEqual({ key: "ic50", ascending: false });
    expect(st.order).toEqual([2, 0, 1]);
    const d = readReviewState({ order: [0, "x"] });
    expect(d.sort).toEqual({ key: "label", ascending: true });
    expect(d.order).toBeNull();
  });
});
