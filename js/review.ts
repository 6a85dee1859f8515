// Reviewing a batch of fits (issue: fit many curves, then look at the ones that need a person):
// the overview's data read from the `review_json` trait, which groups a filter keeps, the group
// table's sort, the small-multiples grid layout and hit test, and the drawing of the grid onto a
// canvas. Pure functions over plain data; the drawing takes a minimal canvas interface so that
// vitest can check what is drawn without a browser.

/** A group's status in a batch (Python's BatchResult.status). */
export type Status = "ok" | "flagged" | "failed";

export const STATUSES: readonly Status[] = ["ok", "flagged", "failed"];

/** One group of the `review_json` trait. */
export interface ReviewGroup {
  label: string;
  status: Status;
  /** Why the group is not ok ("" when ok). */
  reason: string;
  /** Edited by a person during review (an accepted refit). */
  edited: boolean;
  /** The note left with that edit ("" when not edited). */
  note: string;
  /** The group's points (decimated by Python for large groups). */
  x: number[];
  y: number[];
  /** The fitted curve sampled by Python on a grid over the group's x; empty when not fitted. */
  cx: number[];
  cy: (number | null)[];
  /** Key values shown in the table (parameters and derived quantities), by column name. */
  values: Record<string, number | null>;
}

/** The `review_json` trait (Python's review state of a batch); null when not reviewing. */
export interface ReviewJson {
  /** Table columns after label and status, in order. */
  columns: string[];
  groups: ReviewGroup[];
  /** Whether the x axis of every cell is logarithmic (decided once for the batch by Python). */
  log_x: boolean;
}

export type Filter = "all" | "failed" | "flagged";

export const FILTERS: readonly Filter[] = ["all", "failed", "flagged"];

// Our own status colours, chosen to stay apart under the common colour-vision deficiencies
// (common practice: vary lightness as well as hue, and avoid a red/green pair): ok is a calm
// mid blue, flagged a light amber, failed a dark magenta; each also has its own cell frame
// (solid thin, dashed, solid thick) so the status is readable without colour.
export const STATUS_STYLE: Readonly<Record<Status, { colour: string; frame: "thin" | "dashed" | "thick"; word: string }>> = {
  ok: { colour: "#2f6db5", frame: "thin", word: "ok" },
  flagged: { colour: "#d99a1e", frame: "dashed", word: "needs a look" },
  failed: { colour: "#8e1f5c", frame: "thick", word: "failed" },
};

function isStatus(s: unknown): s is Status {
  return s === "ok" || s === "flagged" || s === "failed";
}

function numbers(a: unknown): number[] {
  return Array.isArray(a) ? a.map((v) => (typeof v === "number" ? v : Number.NaN)) : [];
}

/** The trait read loosely (Python writes it); null when absent or malformed. */
export function readReview(raw: unknown): ReviewJson | null {
  if (raw === null || typeof raw !== "object") return null;
  const r = raw as Partial<ReviewJson>;
  if (!Array.isArray(r.groups)) return null;
  const groups: ReviewGroup[] = [];
  for (const g0 of r.groups as unknown[]) {
    if (g0 === null || typeof g0 !== "object") return null;
    const g = g0 as Partial<ReviewGroup>;
    if (typeof g.label !== "string" || !isStatus(g.status)) return null;
    const values: Record<string, number | null> = {};
    if (g.values && typeof g.values === "object") {
      for (const [k, v] of Object.entries(g.values)) values[k] = typeof v === "number" ? v : null;
    }
    groups.push({
      label: g.label,
      status: g.status,
      reason: typeof g.reason === "string" ? g.reason : "",
      edited: g.edited === true,
      note: typeof g.note === "string" ? g.note : "",
      x: numbers(g.x),
      y: numbers(g.y),
      cx: numbers(g.cx),
      cy: Array.isArray(g.cy) ? g.cy.map((v) => (typeof v === "number" ? v : null)) : [],
      values,
    });
  }
  const columns = Array.isArray(r.columns) ? r.columns.filter((c): c is string => typeof c === "string") : [];
  return { columns, groups, log_x: r.log_x === true };
}

/**
 * The `review_state` trait: the filter, the group open in the main plot, the accept button's
 * state, and the table's sort with the order Python worked out for it (`review_sort`).
 */
export interface ReviewState {
  filter: Filter;
  open: string | null;
  canAccept: boolean;
  accepted: boolean;
  sort: { key: SortKey; ascending: boolean };
  /** Every group's index in the table's order; null until Python sends one. */
  order: number[] | null;
}

/** The state trait read loosely; defaults when absent. */
export function readReviewState(raw: unknown): ReviewState {
  const r = (raw !== null && typeof raw === "object" ? raw : {}) as Record<string, unknown>;
  const f = r["filter"];
  const s = (r["sort"] !== null && typeof r["sort"] === "object" ? r["sort"] : {}) as Record<string, unknown>;
  const o = r["order"];
  return {
    filter: f === "failed" || f === "flagged" ? f : "all",
    open: typeof r["open"] === "string" ? r["open"] : null,
    canAccept: r["can_accept"] === true,
    accepted: r["accepted"] === true,
    sort: { key: typeof s["key"] === "string" ? s["key"] : "label", ascending: s["ascending"] !== false },
    order: Array.isArray(o) && o.every((v) => Number.isInteger(v)) ? (o as number[]) : null,
  };
}

/**
 * The rows of the table: the shown groups (`shown`, indices into the groups) in the order
 * Python sent; without one (or one of other groups), the shown order as it is.
 */
export function tableRows(shown: readonly number[], order: readonly number[] | null): number[] {
  if (order === null) return [...shown];
  const keep = new Set(shown);
  const out = order.filter((i) => keep.has(i));
  return out.length === shown.length ? out : [...shown];
}

/** A filter button's text: its name and how many groups it keeps. */
export function filterText(filter: Filter, counts: Record<Status, number>): string {
  if (filter === "all") return `All (${counts.ok + counts.flagged + counts.failed})`;
  return filter === "failed" ? `Failed (${counts.failed})` : `Flagged (${counts.flagged})`;
}


/** Indices of the groups a filter keeps, in their order. */
export function filterGroups(groups: readonly ReviewGroup[], filter: Filter): number[] {
  const out: number[] = [];
  groups.forEach((g, i) => {
    if (filter === "all" || g.status === filter) out.push(i);
  });
  return out;
}

/** How many groups have each status (the filter buttons show the counts). */
export function statusCounts(groups: readonly ReviewGroup[]): Record<Status, number> {
  const n: Record<Status, number> = { ok: 0, flagged: 0, failed: 0 };
  for (const g of groups) n[g.status] += 1;
  return n;
}

export type SortKey = "label" | "status" | string;

/** The grid of small multiples: columns, rows and each cell's size in CSS pixels. */
export interface GridLayout {
  cols: number;
  rows: number;
  cellW: number;
  cellH: number;
  gap: number;
  width: number;
  height: number;
}

/**
 * Lay `n` cells out in a `width`-wide area: as many columns as fit at `minCell` pixels, cells
 * widened to fill the row, height = width × `aspect`.
 */
export function gridLayout(n: number, width: number, minCell = 64, gap = 4, aspect = 0.75): GridLayout {
  const w = Math.max(width, minCell);
  const cols = Math.max(1, Math.floor((w + gap) / (minCell + gap)));
  const rows = Math.max(0, Math.ceil(n / cols));
  const cellW = (w - gap * (cols - 1)) / cols;
  const cellH = Math.round(cellW * aspect);
  return { cols, rows, cellW, cellH, gap, width: w, height: rows === 0 ? 0 : rows * cellH + (rows - 1) * gap };
}

/** The top-left corner of cell k (row-major). */
export function cellOrigin(k: number, layout: GridLayout): { x: number; y: number } {
  const c = k % layout.cols;
  const r = Math.floor(k / layout.cols);
  return { x: c * (layout.cellW + layout.gap), y: r * (layout.cellH + layout.gap) };
}

/** Which cell (index into the shown list) a point in the grid falls on; null in a gap or past the end. */
export function cellAt(px: number, py: number, layout: GridLayout, shown: number): number | null {
  if (px < 0 || py < 0) return null;
  const c = Math.floor(px / (layout.cellW + layout.gap));
  const r = Math.floor(py / (layout.cellH + layout.gap));
  if (c >= layout.cols) return null;
  if (px - c * (layout.cellW + layout.gap) > layout.cellW) return null;
  if (py - r * (layout.cellH + layout.gap) > layout.cellH) return null;
  const k = r * layout.cols + c;
  return k < shown ? k : null;
}

/** A cell's data-to-pixel maps; the range covers the points and the curve, with a small margin. */
export interface CellScale {
  sx: (x: number) => number;
  sy: (y: number) => number;
}

function finiteRange(values: Iterable<number | null>, log: boolean): [number, number] | null {
  let lo = Infinity;
  let hi = -Infinity;
  for (const v0 of values) {
    if (v0 === null || !Number.isFinite(v0)) continue;
    if (log && v0 <= 0) continue;
    const v = log ? Math.log10(v0) : v0;
    if (v < lo) lo = v;
    if (v > hi) hi = v;
  }
  if (lo > hi) return null;
  if (lo === hi) return [lo - 0.5, hi + 0.5];
  return [lo, hi];
}

/** Maps for one group's cell (x on a log scale when `logX`; points at x <= 0 are then not drawn). */
export function cellScale(g: ReviewGroup, w: number, h: number, logX: boolean, pad = 4): CellScale | null {
  const xr = finiteRange([...g.x, ...g.cx], logX);
  const yr = finiteRange([...g.y, ...g.cy], false);
  if (xr === null || yr === null) return null;
  const ym = (yr[1] - yr[0]) * 0.06;
  const [y0, y1] = [yr[0] - ym, yr[1] + ym];
  const iw = Math.max(1, w - 2 * pad);
  const ih = Math.max(1, h - 2 * pad);
  return {
    sx: (x: number) => pad + ((logX ? Math.log10(x) : x) - xr[0]) / (xr[1] - xr[0]) * iw,
    sy: (y: number) => pad + (1 - (y - y0) / (y1 - y0)) * ih,
  };
}

/** The part of CanvasRenderingContext2D the overview uses (a recording fake stands in for tests). */
export interface Canvas2D {
  fillStyle: string;
  strokeStyle: string;
  lineWidth: number;
  globalAlpha: number;
  font: string;
  setLineDash(segments: number[]): void;
  beginPath(): void;
  moveTo(x: number, y: number): void;
  lineTo(x: number, y: number): void;
  rect(x: number, y: number, w: number, h: number): void;
  fillRect(x: number, y: number, w: number, h: number): void;
  clearRect(x: number, y: number, w: number, h: number): void;
  stroke(): void;
  fill(): void;
  fillText(text: string, x: number, y: number): void;
  save(): void;
  restore(): void;
}

/** Draw the shown groups (indices into `review.groups`) as small multiples; returns the count drawn. */
export function drawOverview(
  ctx: Canvas2D,
  review: ReviewJson,
  shown: readonly number[],
  layout: GridLayout,
  selected: number | null = null,
): number {
  ctx.clearRect(0, 0, layout.width, layout.height);
  const logX = review.log_x;
  shown.forEach((gi, k) => {
    const g = review.groups[gi]!;
    const { x: ox, y: oy } = cellOrigin(k, layout);
    const st = STATUS_STYLE[g.status];
    const w = layout.cellW;
    const h = layout.cellH;
    ctx.save();
    // Frame: the status by line style as well as colour.
    ctx.strokeStyle = st.colour;
    ctx.lineWidth = gi === selected ? 3 : st.frame === "thick" ? 2 : 1;
    ctx.setLineDash(st.frame === "dashed" ? [4, 3] : []);
    ctx.beginPath();
    ctx.rect(ox + 0.5, oy + 0.5, w - 1, h - 1);
    ctx.stroke();
    ctx.setLineDash([]);
    const sc = cellScale(g, w, h, logX);
    if (sc !== null) {
      // Points: small squares in a neutral grey, so the status colour belongs to curve and frame.
      ctx.fillStyle = "#555555";
      for (let i = 0; i < g.x.length; i++) {
        const xv = g.x[i]!;
        const yv = g.y[i]!;
        if (!Number.isFinite(xv) || !Number.isFinite(yv) || (logX && xv <= 0)) continue;
        ctx.fillRect(ox + sc.sx(xv) - 1, oy + sc.sy(yv) - 1, 2, 2);
      }
      // The fitted curve, broken where the model is undefined.
      ctx.strokeStyle = st.colour;
      ctx.lineWidth = 1.5;
      ctx.beginPath();
      let pen = false;
      for (let i = 0; i < g.cx.length; i++) {
        const xv = g.cx[i]!;
        const yv = g.cy[i];
        if (yv === null || yv === undefined || !Number.isFinite(yv) || !Number.isFinite(xv) || (logX && xv <= 0)) {
          pen = false;
          continue;
        }
        const px = ox + sc.sx(xv);
        const py = oy + sc.sy(yv);
        if (pen) ctx.lineTo(px, py);
        else ctx.moveTo(px, py);
        pen = true;
      }
      ctx.stroke();
    }
    // The label on a light plate, so it stays readable where the curve passes under it.
    const text = g.edited ? `${g.label} ✎` : g.label;
    ctx.fillStyle = "rgba(255, 255, 255, 0.8)";
    ctx.fillRect(ox + 2, oy + 2, Math.min(w - 4, text.length * 6 + 3), 11);
    ctx.fillStyle = "#222222";
    ctx.font = "10px sans-serif";
    ctx.fillText(text, ox + 3, oy + 11);
    ctx.restore();
  });
  return shown.length;
}
