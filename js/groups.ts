// Several curves at once (a widget made with by=): the `groups_json` trait read into plain data,
// each group's look (colour and marker), and which values draw which group's curve. Pure
// functions, no DOM: the plot and the widget use them, vitest checks them.

import type { ParamRecord } from "./params";

/** The `groups_json` trait (Python's _groups_json); null for a widget with one curve. */
export interface GroupsJson {
  by: string[];
  labels: string[];
  selected: string;
  hidden: string[];
  excluded: string[];
  /** Every group's values now (shared parameters repeat). */
  values: Record<string, Record<string, number>>;
  /** Every group's fitted values after a global fit, else null. */
  fitted: Record<string, Record<string, number>> | null;
  fit_success: boolean | null;
  /** Group index of each drawn point, in the order of the `data` trait. */
  point_group: number[];
  /** Curves sampled by Python, for models the page cannot evaluate (callables). */
  curves?: Record<string, { x: number[]; y: (number | null)[] } | null> | null;
}

export type Marker = "circle" | "square" | "diamond" | "triangle" | "triangle_down" | "hexagon";

export interface GroupStyle {
  colour: string;
  marker: Marker;
}

// Our own ordered colours. The principle (common practice for colour-vision deficiencies):
// neighbours in the order differ in lightness as well as hue, so a deuteranope or protanope,
// who loses much of the red-green axis, still tells them apart by lightness, and no two of the
// first four are a red/green pair of similar lightness. The blue-orange contrast leads because
// it survives all three common deficiencies. Shapes repeat the distinction without colour.
export const GROUP_COLOURS: readonly string[] = [
  "#1f5aa6", // dark blue
  "#e8930c", // light amber
  "#7a2e73", // dark plum
  "#58b5e8", // light sky blue
  "#3c3c3c", // near black
  "#d3c12b", // light mustard
  "#a3461d", // mid rust
  "#8a8fd1", // light periwinkle
];

// Marker shapes in order. Colour and shape cycle together (8 and 6 long), so every group gets
// another shape than its neighbours and the pair stays unique for lcm(8, 6) = 24 groups.
export const GROUP_MARKERS: readonly Marker[] = ["circle", "square", "diamond", "triangle", "triangle_down", "hexagon"];

/** The look of group i: colour i mod 8, marker i mod 6. */
export function groupStyle(i: number): GroupStyle {
  const k = Math.max(0, Math.floor(i));
  const nc = GROUP_COLOURS.length;
  return {
    colour: GROUP_COLOURS[k % nc]!,
    marker: GROUP_MARKERS[k % GROUP_MARKERS.length]!,
  };
}

/** Relative luminance of a #rrggbb colour (WCAG's definition), for contrast checks. */
export function luminance(hex: string): number {
  const m = /^#([0-9a-f]{2})([0-9a-f]{2})([0-9a-f]{2})$/i.exec(hex);
  if (!m) throw new Error(`not a #rrggbb colour: ${hex}`);
  const lin = (s: string): number => {
    const c = parseInt(s, 16) / 255;
    return c <= 0.03928 ? c / 12.92 : ((c + 0.055) / 1.055) ** 2.4;
  };
  return 0.2126 * lin(m[1]!) + 0.7152 * lin(m[2]!) + 0.0722 * lin(m[3]!);
}

/** The trait checked loosely (Python writes it); null when absent or malformed. */
export function readGroups(raw: unknown): GroupsJson | null {
  if (raw === null || typeof raw !== "object") return null;
  const g = raw as Partial<GroupsJson>;
  if (!Array.isArray(g.labels) || typeof g.selected !== "string" || typeof g.values !== "object" || g.values === null) {
    return null;
  }
  return {
    by: Array.isArray(g.by) ? g.by : [],
    labels: g.labels,
    selected: g.labels.includes(g.selected) ? g.selected : (g.labels[0] ?? ""),
    hidden: Array.isArray(g.hidden) ? g.hidden : [],
    excluded: Array.isArray(g.excluded) ? g.excluded : [],
    values: g.values,
    fitted: g.fitted ?? null,
    fit_success: g.fit_success ?? null,
    point_group: Array.isArray(g.point_group) ? g.point_group : [],
    curves: g.curves ?? null,
  };
}

/**
 * The values that draw one group's curve: a shared (or fixed) record's value, else the group's
 * own. The selected group's own values are the panel's records (they change during a drag).
 */
export function valuesForGroup(
  groups: GroupsJson,
  label: string,
  records: Readonly<Record<string, ParamRecord>>,
): Record<string, number> {
  const own = groups.values[label] ?? {};
  const out: Record<string, number> = {};
  for (const [name, r] of Object.entries(records)) {
    const v = own[name];
    out[name] = r.scope === "per_group" && !r.fixed && typeof v === "number" ? v : (r.value ?? NaN);
  }
  return out;
}

export interface GroupCurve {
  label: string;
  index: number;
  style: GroupStyle;
  values: Record<string, number>;
  /** Left out of the fit: drawn faded. */
  excluded: boolean;
}

/**
 * The curves of the groups other than the selected one that are drawn (not hidden). They do
 * not change while the selected group's handle is dragged, except through a shared parameter;
 * the widget redraws them only when the trait or a shared value changes, not on every frame.
 */
export function otherCurves(
  groups: GroupsJson,
  records: Readonly<Record<string, ParamRecord>>,
): GroupCurve[] {
  const hidden = new Set(groups.hidden);
  const excluded = new Set(groups.excluded);
  return groups.labels.flatMap((label, index) =>
    label === groups.selected || hidden.has(label)
      ? []
      : [{ label, index, style: groupStyle(index), values: valuesForGroup(groups, label, records), excluded: excluded.has(label) }],
  );
}

/** Names a drag of the selected group's handle changes for every group (the shared ones). */
export function sharedMoved(moves: readonly string[], records: Readonly<Record<string, ParamRecord>>): boolean {
  return moves.some((n) => records[n]?.scope === "shared");
}

/** The per-group value table: one row per parameter, one cell per group, selected marked. */
export function valueTable(
  groups: GroupsJson,
  records: Readonly<Record<string, ParamRecord>>,
): { name: string; shared: boolean; fixed: boolean; cells: { label: string; value: number; selected: boolean }[] }[] {
  return Object.entries(records).map(([name, r]) => ({
    name,
    shared: r.scope === "shared",
    fixed: r.fixed,
    cells: groups.labels.map((label) => ({
      label,
      value: label === groups.selected ? (r.value ?? NaN) : valuesForGroup(groups, label, records)[name]!,
      selected: label === groups.selected,
    })),
  }));
}

// ---------------------------------------------------------------------------------------------
// Markers: one geometry for the canvas points and the legend's SVG swatches
// ---------------------------------------------------------------------------------------------

/** What a marker is traced into: a canvas context or a Path2D (both have these). */
export interface PathSink {
  moveTo(x: number, y: number): void;
  lineTo(x: number, y: number): void;
  arc(x: number, y: number, r: number, a0: number, a1: number): void;
  closePath(): void;
}

/**
 * The corners of a polygon marker of "radius" r around (0, 0), y down as on screen; null for
 * the circle. Each shape is scaled to about the circle's area, so no group looks heavier.
 */
export function markerVertices(marker: Marker, r: number): [number, number][] | null {
  const poly = (n: number, rot: number, scale: number): [number, number][] =>
    Array.from({ length: n }, (_, k) => {
      const a = rot + (2 * Math.PI * k) / n;
      return [scale * r * Math.cos(a), scale * r * Math.sin(a)] as [number, number];
    });
  switch (marker) {
    case "circle":
      return null;
    case "square":
      return poly(4, Math.PI / 4, 1.25);
    case "diamond":
      return poly(4, 0, 1.3);
    case "triangle":
      return poly(3, -Math.PI / 2, 1.45);
    case "triangle_down":
      return poly(3, Math.PI / 2, 1.45);
    case "hexagon":
      return poly(6, 0, 1.1);
  }
}

/** Trace one marker centred at (x, y) into a canvas path (fill or stroke it after). */
export function traceMarker(sink: PathSink, marker: Marker, x: number, y: number, r: number): void {
  const v = markerVertices(marker, r);
  if (v === null) {
    sink.moveTo(x + r, y);
    sink.arc(x, y, r, 0, 2 * Math.PI);
    return;
  }
  sink.moveTo(x + v[0]![0], y + v[0]![1]);
  for (let k = 1; k < v.length; k++) sink.lineTo(x + v[k]![0], y + v[k]![1]);
  sink.closePath();
}

/** The same marker as SVG path data (the legend's swatches). */
export function markerSvgPath(marker: Marker, x: number, y: number, r: number): string {
  const f = (n: number): string => String(Math.round(n * 100) / 100);
  const v = markerVertices(marker, r);
  if (v === null) return `M${f(x - r)},${f(y)}a${f(r)},${f(r)} 0 1,0 ${f(2 * r)},0a${f(r)},${f(r)} 0 1,0 ${f(-2 * r)},0Z`;
  return `M${v.map(([dx, dy]) => `${f(x + dx)},${f(y + dy)}`).join("L")}Z`;
}

// ---------------------------------------------------------------------------------------------
// What the page shows for the groups
// ---------------------------------------------------------------------------------------------

export interface LegendEntry {
  label: string;
  index: number;
  style: GroupStyle;
  selected: boolean;
  hidden: boolean;
  excluded: boolean;
  /** Accessible names of the entry's three buttons. */
  selectName: string;
  hideName: string;
  excludeName: string;
  /** A short word on the entry's state, for sighted users ("" when plain). */
  note: string;
}

/** One legend entry per group, in the groups' order. */
export function legendEntries(groups: GroupsJson): LegendEntry[] {
  const hidden = new Set(groups.hidden);
  const excluded = new Set(groups.excluded);
  return groups.labels.map((label, index) => {
    const h = hidden.has(label);
    const x = excluded.has(label);
    const note = [h ? "hidden" : "", x ? "left out" : ""].filter(Boolean).join(", ");
    const said = [h ? "hidden" : "", x ? "left out of the fit" : ""].filter(Boolean).join(", ");
    return {
      label,
      index,
      style: groupStyle(index),
      selected: label === groups.selected,
      hidden: h,
      excluded: x,
      selectName: `Group ${label}${label === groups.selected ? " (selected)" : ""}${said ? `, ${said}` : ""}`,
      hideName: `Hide group ${label}`,
      excludeName: `Leave group ${label} out of the fit`,
      note,
    };
  });
}

/** The look of every drawn point: -1 for a point not drawn (its group hidden). */
export interface PointGroups {
  /** Group index of each point of the `data` trait, -1 where the group is hidden. */
  index: Int32Array;
  styles: GroupStyle[];
  /** Per group: left out of the fit (drawn faded and hollow). */
  faded: boolean[];
}

/** The points' groups as the plot draws them; null when the trait does not fit the data. */
export function pointGroups(groups: GroupsJson, n: number): PointGroups | null {
  if (groups.point_group.length !== n) return null;
  const hidden = new Set(groups.hidden.map((l) => groups.labels.indexOf(l)));
  const excluded = new Set(groups.excluded);
  const index = Int32Array.from(groups.point_group, (g) => (hidden.has(g) ? -1 : g));
  return {
    index,
    styles: groups.labels.map((_, i) => groupStyle(i)),
    faded: groups.labels.map((l) => excluded.has(l)),
  };
}

/** Is a group's curve at its fitted values (to rounding)? Such curves are drawn solid. */
export function atFitted(groups: GroupsJson, label: string, values: Readonly<Record<string, number>>): boolean {
  const f = groups.fitted?.[label];
  if (!f) return false;
  return Object.entries(values).every(([n, v]) => {
    const w = f[n];
    return typeof w === "number" && Math.abs(v - w) <= 1e-12 * Math.max(1, Math.abs(w));
  });
}
