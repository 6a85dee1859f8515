// The plot: d3 scales and axes, zoom and pan, data points on a canvas (so 100k points stay
// smooth), the current and fitted curves as SVG paths, the fit's confidence/prediction bands as
// quiet filled areas under them, draggable handles, box selection and a residual strip. It knows nothing of Python: the widget feeds it values and receives events.

import { axisBottom, axisLeft } from "d3-axis";
import { brush, type BrushBehavior, type D3BrushEvent } from "d3-brush";
import { scaleLinear, scaleLog, type ScaleContinuousNumeric } from "d3-scale";
import { select, type Selection } from "d3-selection";
import { zoom, zoomIdentity, type D3ZoomEvent, type ZoomBehavior, type ZoomTransform } from "d3-zoom";
import { areaFromPixels, pathFromPixels, sampleAxis } from "./curve";
import { decimateCells } from "./decimate";
import { type PointGroups, traceMarker } from "./groups";
import type { Point } from "./handles";
import type { BandView, BandViews } from "./judge";
import type { PointSet, Scale } from "./state";
import { groupReplicates } from "./stats";
import { tickLabel } from "./validate";

type Lin = ScaleContinuousNumeric<number, number>;
type SVGSel<E extends Element = SVGGElement> = Selection<E, unknown, null, undefined>;

export interface HandleView {
  /** Stable key: a handle's name, or "pin:<i>" for a generic pin. */
  key: string;
  /** Accessible name: the feature and the parameters it moves. */
  ariaLabel: string;
  valueNow: number;
  valueText: string;
  pos: Point;
  pin: boolean;
}

export interface PlotCallbacks {
  onDrag(key: string, target: Point, phase: "start" | "move" | "end"): void;
  /** Arrow-key nudge of a handle by (dx, dy) pixels (screen directions, y down). */
  onNudge(key: string, dxPx: number, dyPx: number): void;
  onToggleRows(rows: number[]): void;
}

/** Another group's curve (with by=): drawn on its own layer, redrawn apart from the selected one. */
export interface GroupCurveView {
  label: string;
  colour: string;
  source: CurveSource;
  /** Left out of the fit: drawn faded. */
  excluded: boolean;
  /** At the group's fitted values: drawn solid (else dashed, like the selected start curve). */
  fitted: boolean;
}

/** A curve either as a function to sample across the view, or as given samples. */
export type CurveSource =
  | { kind: "fn"; fn: (xs: Float64Array) => Float64Array }
  | { kind: "samples"; x: ArrayLike<number>; y: ArrayLike<number | null> }
  | null;

const MARGIN = { left: 66, right: 18, top: 14, bottom: 44 };
const MAIN_HEIGHT = 360;
const RESID_HEIGHT = 120;
const RESID_MARGIN = { top: 8, bottom: 34 };
// Above this many points the canvas draws one point per occupied 2-pixel cell.
const THIN_ABOVE = 4000;

let uid = 0;

function axisValue(v: number, log: boolean): number {
  return log ? Math.log10(v) : v;
}

/** Visible-span-based padding of a data extent, in axis space (decades on a log axis). */
function paddedDomain(values: Float64Array, log: boolean, pad: number): [number, number] {
  let lo = Infinity;
  let hi = -Infinity;
  for (let i = 0; i < values.length; i++) {
    const v = values[i]!;
    if (!Number.isFinite(v) || (log && !(v > 0))) continue;
    const a = axisValue(v, log);
    if (a < lo) lo = a;
    if (a > hi) hi = a;
  }
  if (!(lo <= hi)) return log ? [0.01, 100] : [0, 1];
  let span = hi - lo;
  if (span === 0) span = log ? 1 : Math.abs(lo) || 1;
  lo -= span * pad;
  hi += span * pad;
  return log ? [10 ** lo, 10 ** hi] : [lo, hi];
}

function makeScale(scale: Scale, domain: [number, number], range: [number, number]): Lin {
  const s = scale === "log" ? scaleLog() : scaleLinear();
  return (s as Lin).domain(domain).range(range);
}

function cssVar(el: Element, name: string, fallback: string): string {
  const v = getComputedStyle(el).getPropertyValue(name).trim();
  return v || fallback;
}

export class Plot {
  readonly el: HTMLDivElement;
  private readonly cb: PlotCallbacks;
  private width = 640;
  private plotW = 640 - MARGIN.left - MARGIN.right;
  private plotH = MAIN_HEIGHT - MARGIN.top - MARGIN.bottom;

  private readonly canvas: HTMLCanvasElement;
  private readonly svg: SVGSel<SVGSVGElement>;
  private readonly area: SVGSel;
  private readonly surface: SVGSel<SVGRectElement>;
  private readonly gx: SVGSel;
  private readonly gy: SVGSel;
  private readonly xLabel: SVGSel<SVGTextElement>;
  private readonly yLabel: SVGSel<SVGTextElement>;
  private readonly fitPath: SVGSel<SVGPathElement>;
  private readonly predictionPath: SVGSel<SVGPathElement>;
  private readonly confidencePath: SVGSel<SVGPathElement>;
  private readonly compareGroup: SVGSel;
  private readonly groupLayer: SVGSel;
  private readonly curvePath: SVGSel<SVGPathElement>;
  private readonly gBrush: SVGSel;
  private readonly gHandles: SVGSel;
  private readonly clipRect: SVGSel<SVGRectElement>;

  private readonly residWrap: HTMLDivElement;
  private readonly residCanvas: HTMLCanvasElement;
  private readonly residSvg: SVGSel<SVGSVGElement>;
  private readonly residGx: SVGSel;
  private readonly residGy: SVGSel;
  private readonly residZero: SVGSel<SVGLineElement>;

  private readonly zoomer: ZoomBehavior<SVGSVGElement, unknown>;
  private readonly brusher: BrushBehavior<unknown>;
  private transform: ZoomTransform = zoomIdentity;

  private points: PointSet = {
    x: new Float64Array(0),
    y: new Float64Array(0),
    row: new Int32Array(0),
    excluded: new Uint8Array(0),
    n: 0,
  };
  private xScaleKind: Scale = "linear";
  private yScaleKind: Scale = "linear";
  private xBase: Lin = scaleLinear();
  private yBase: Lin = scaleLinear();
  private curve: CurveSource = null;
  private fitted: CurveSource = null;
  private compared: { name: string; source: CurveSource }[] = [];
  private handles: HandleView[] = [];
  private pointGroups: PointGroups | null = null;
  private groupCurves: GroupCurveView[] = [];
  private residuals: Float64Array | null = null;
  private residualsShown = true;
  private bands: BandViews = { confidence: null, prediction: null };
  private boxMode = false;
  private wheelActive = false;
  // The click that ends a box drag must not also toggle the point under the pointer.
  private suppressClick = false;

  // `groups` (the other groups' curves) is apart from `curves` so a drag, which redraws the
  // selected group's curve every frame, never redraws the others.
  private dirty = { points: true, curves: true, groups: true, handles: true, axes: true, resid: true };
  private frame: number | null = null;
  private readonly resizeObserver: ResizeObserver | null;

  constructor(parent: HTMLElement, cb: PlotCallbacks) {
    this.cb = cb;
    const id = `cw-clip-${++uid}`;
    this.el = document.createElement("div");
    this.el.className = "cw-plot";
    parent.appendChild(this.el);

    const main = document.createElement("div");
    main.className = "cw-plot-main";
    this.el.appendChild(main);
    this.canvas = document.createElement("canvas");
    this.canvas.className = "cw-points";
    this.canvas.setAttribute("aria-hidden", "true");
    main.appendChild(this.canvas);

    this.svg = select(main)
      .append("svg")
      .attr("class", "cw-svg")
      .attr("role", "group")
      .attr("aria-label", "Plot of the data and the curve") as unknown as SVGSel<SVGSVGElement>;
    this.clipRect = this.svg.append("defs").append("clipPath").attr("id", id).append("rect");
    this.gx = this.svg.append("g").attr("class", "cw-axis cw-axis-x");
    this.gy = this.svg.append("g").attr("class", "cw-axis cw-axis-y");
    this.xLabel = this.svg.append("text").attr("class", "cw-axis-label").attr("text-anchor", "middle");
    this.yLabel = this.svg
      .append("text")
      .attr("class", "cw-axis-label")
      .attr("text-anchor", "middle")
      .attr("transform", "rotate(-90)");
    this.area = this.svg.append("g").attr("class", "cw-area");
    this.surface = this.area.append("rect").attr("class", "cw-surface");
    const clipped = this.area.append("g").attr("clip-path", `url(#${id})`);
    // Bands first, so every curve is drawn over them; the wider prediction band underneath.
    this.predictionPath = clipped.append("path").attr("class", "cw-band cw-band-prediction");
    this.confidencePath = clipped.append("path").attr("class", "cw-band cw-band-confidence");
    this.compareGroup = clipped.append("g").attr("class", "cw-compare");
    // The other groups' curves (by=): under the selected group's, on their own redraw flag.
    this.groupLayer = clipped.append("g").attr("class", "cw-group-curves");
    this.fitPath = clipped.append("path").attr("class", "cw-curve-fit");
    this.curvePath = clipped.append("path").attr("class", "cw-curve");
    this.gBrush = this.area.append("g").attr("class", "cw-brush");
    this.gHandles = this.area.append("g").attr("class", "cw-handles");

    // Residual strip (shown after a fit).
    this.residWrap = document.createElement("div");
    this.residWrap.className = "cw-resid";
    this.residWrap.hidden = true;
    this.el.appendChild(this.residWrap);
    this.residCanvas = document.createElement("canvas");
    this.residCanvas.className = "cw-points";
    this.residCanvas.setAttribute("aria-hidden", "true");
    this.residWrap.appendChild(this.residCanvas);
    this.residSvg = select(this.residWrap)
      .append("svg")
      .attr("class", "cw-svg")
      .attr("role", "img")
      .attr("aria-label", "Residuals of the fit") as unknown as SVGSel<SVGSVGElement>;
    this.residGx = this.residSvg.append("g").attr("class", "cw-axis cw-axis-x");
    this.residGy = this.residSvg.append("g").attr("class", "cw-axis cw-axis-y");
    this.residZero = this.residSvg.append("line").attr("class", "cw-zero");
    this.residSvg
      .append("text")
      .attr("class", "cw-axis-label")
      .attr("text-anchor", "middle")
      .attr("transform", "rotate(-90)")
      .attr("x", -(RESID_HEIGHT - RESID_MARGIN.bottom + RESID_MARGIN.top) / 2)
      .attr("y", 16)
      .text("residual");

    this.zoomer = zoom<SVGSVGElement, unknown>()
      .scaleExtent([1 / 50, 1e5])
      .filter((event: Event) => {
        const e = event as MouseEvent | WheelEvent;
        if ((e.target as Element | null)?.closest?.(".cw-handle")) return false;
        if (e.type === "wheel") return this.wheelActive || e.ctrlKey || e.metaKey;
        if (this.boxMode || e.shiftKey) return false;
        return !e.button;
      })
      .on("zoom", (event: D3ZoomEvent<SVGSVGElement, unknown>) => {
        this.transform = event.transform;
        this.invalidate("points", "curves", "groups", "handles", "axes", "resid");
      });
    this.svg.call(this.zoomer).on("dblclick.zoom", null);
    // The wheel zooms only once the plot has been pressed (or with Ctrl/Cmd), so scrolling the
    // notebook past the widget never zooms it by accident.
    this.svg.on("pointerdown.cw", () => (this.wheelActive = true));
    this.svg.on("pointerleave.cw", () => (this.wheelActive = false));

    // An explicit extent from the start: d3-brush's default reads the SVG's size, which cannot
    // be resolved while anywidget renders into an element not yet attached to the page.
    this.brusher = brush<unknown>()
      .extent([
        [0, 0],
        [1, 1],
      ])
      .filter((event: MouseEvent) => (this.boxMode || event.shiftKey) && !event.button)
      .on("end", (event: D3BrushEvent<unknown>) => this.brushEnded(event));
    this.gBrush.call(this.brusher);

    this.svg.on("click.cw", (event: MouseEvent) => this.clicked(event));

    this.resizeObserver =
      typeof ResizeObserver === "undefined"
        ? null
        : new ResizeObserver(() => {
            const w = this.el.clientWidth;
            if (w > 0 && Math.abs(w - this.width) > 1) this.resize(w);
          });
    this.resizeObserver?.observe(this.el);
    this.resize(this.el.clientWidth || 640);
  }

  destroy(): void {
    if (this.frame !== null) cancelAnimationFrame(this.frame);
    this.resizeObserver?.disconnect();
    this.svg.on(".zoom", null).on(".cw", null);
    this.gBrush.on(".brush", null);
    this.el.remove();
  }

  // ------------------------------------------------------------------ inputs from the widget
  setBoxMode(on: boolean): void {
    this.boxMode = on;
    this.el.classList.toggle("cw-boxmode", on);
  }

  setData(points: PointSet, xLabel: string, yLabel: string, resetView: boolean): void {
    this.points = points;
    this.xLabel.text(xLabel);
    this.yLabel.text(yLabel);
    if (resetView) this.fitDomains();
    this.invalidate("points", "resid", "axes", "curves", "groups", "handles");
  }

  setScales(x: Scale, y: Scale): void {
    const changed = x !== this.xScaleKind || y !== this.yScaleKind;
    this.xScaleKind = x;
    this.yScaleKind = y;
    if (changed) this.fitDomains();
  }

  setCurve(curve: CurveSource): void {
    this.curve = curve;
    this.invalidate("curves");
  }

  setFitted(fitted: CurveSource, residuals: Float64Array | null): void {
    this.fitted = fitted;
    this.residuals = residuals;
    this.residWrap.hidden = residuals === null || !this.residualsShown;
    this.el.classList.toggle("cw-has-fit", fitted !== null);
    this.invalidate("curves", "resid");
  }

  /** Show or hide the residual strip (it shows only once there are residuals). */
  setResidualsShown(on: boolean): void {
    this.residualsShown = on;
    this.residWrap.hidden = this.residuals === null || !on;
    this.invalidate("resid");
  }

  /** The fit's bands (null for a band not drawn), as quiet areas under the curves. */
  setBands(bands: BandViews): void {
    this.bands = bands;
    this.invalidate("curves");
  }

  /** Earlier fits of other models, drawn faintly for comparison. */
  setCompare(curves: { name: string; source: CurveSource }[]): void {
    this.compared = curves;
    this.invalidate("curves");
  }

  /** Colour and marker per point (by=), or null for one curve; hidden groups are not drawn. */
  setPointGroups(groups: PointGroups | null): void {
    this.pointGroups = groups;
    this.invalidate("points", "resid");
  }

  /** The curves of the groups other than the selected one (by=). */
  setGroupCurves(curves: GroupCurveView[]): void {
    this.groupCurves = curves;
    this.invalidate("groups");
  }

  /**
   * The selected group (by=): its curves carry its label (the widget sets the colour, as the
   * --cw-curve and --cw-fit variables, for the plot and the key above it); null for one curve.
   */
  setSelectedGroup(group: { label: string; colour: string } | null): void {
    if (group === null) {
      this.curvePath.attr("data-cw-group-curve", null);
      this.fitPath.attr("data-cw-group-fit", null);
    } else {
      this.curvePath.attr("data-cw-group-curve", group.label).attr("data-colour", group.colour);
      this.fitPath.attr("data-cw-group-fit", group.label).attr("data-colour", group.colour);
    }
    this.el.classList.toggle("cw-grouped", group !== null);
  }

  /** Is point i drawn (its group not hidden)? */
  private shown(i: number): boolean {
    return this.pointGroups === null || this.pointGroups.index[i]! >= 0;
  }

  /** Viewport (client) coordinates of the drawn point of an input row, or null (tests, a11y). */
  pointClientXY(row: number): { x: number; y: number } | null {
    const { x, y } = this.scales();
    const r = this.surface.node()!.getBoundingClientRect();
    const { x: xs, y: ys, row: rows, n } = this.points;
    for (let i = 0; i < n; i++) {
      if (rows[i] !== row) continue;
      if (!this.shown(i)) return null;
      const px = x(xs[i]!);
      const py = y(ys[i]!);
      if (!Number.isFinite(px) || !Number.isFinite(py)) return null;
      if (px < 0 || py < 0 || px > this.plotW || py > this.plotH) return null;
      return { x: r.left + px, y: r.top + py };
    }
    return null;
  }

  setHandles(handles: HandleView[]): void {
    this.handles = handles;
    this.invalidate("handles");
  }

  /** Draw everything now (tests, and the end of a drag). */
  flush(): void {
    if (this.frame !== null) {
      cancelAnimationFrame(this.frame);
      this.frame = null;
    }
    this.draw();
  }

  resetView(): void {
    this.svg.call(this.zoomer.transform, zoomIdentity);
  }

  zoomBy(k: number): void {
    this.svg.call(this.zoomer.scaleBy, k);
  }

  /** Current visible scales (data -> pixel within the plot area). */
  scales(): { x: Lin; y: Lin } {
    return {
      x: this.transform.rescaleX(this.xBase),
      y: this.transform.rescaleY(this.yBase),
    };
  }

  /** Visible width and height in axis units (decades on a log axis). */
  visibleSpan(): { x: number; y: number } {
    const { x, y } = this.scales();
    const [x0, x1] = x.domain() as [number, number];
    const [y0, y1] = y.domain() as [number, number];
    const sx = Math.abs(axisValue(x1, this.xScaleKind === "log") - axisValue(x0, this.xScaleKind === "log"));
    const sy = Math.abs(axisValue(y1, this.yScaleKind === "log") - axisValue(y0, this.yScaleKind === "log"));
    return { x: sx > 0 ? sx : 1, y: sy > 0 ? sy : 1 };
  }

  /** Data coordinates of a point given in plot pixels. */
  invert(px: number, py: number): Point {
    const { x, y } = this.scales();
    return { x: x.invert(px), y: y.invert(py) };
  }

  /** Plot pixels of a data point. */
  project(p: Point): { px: number; py: number } {
    const { x, y } = this.scales();
    return { px: x(p.x), py: y(p.y) };
  }

  plotSize(): { w: number; h: number } {
    return { w: this.plotW, h: this.plotH };
  }

  // ------------------------------------------------------------------ layout
  private resize(width: number): void {
    this.width = Math.max(320, Math.floor(width));
    this.plotW = this.width - MARGIN.left - MARGIN.right;
    this.plotH = MAIN_HEIGHT - MARGIN.top - MARGIN.bottom;
    this.svg.attr("width", this.width).attr("height", MAIN_HEIGHT);
    this.area.attr("transform", `translate(${MARGIN.left},${MARGIN.top})`);
    this.surface.attr("width", this.plotW).attr("height", this.plotH);
    this.clipRect.attr("width", this.plotW).attr("height", this.plotH);
    this.gx.attr("transform", `translate(${MARGIN.left},${MARGIN.top + this.plotH})`);
    this.gy.attr("transform", `translate(${MARGIN.left},${MARGIN.top})`);
    this.xLabel.attr("x", MARGIN.left + this.plotW / 2).attr("y", MAIN_HEIGHT - 6);
    this.yLabel.attr("x", -(MARGIN.top + this.plotH / 2)).attr("y", 16);
    this.brusher.extent([
      [0, 0],
      [this.plotW, this.plotH],
    ]);
    this.gBrush.call(this.brusher);
    this.sizeCanvas(this.canvas, this.plotW, this.plotH, MARGIN.left, MARGIN.top);

    const rh = RESID_HEIGHT - RESID_MARGIN.top - RESID_MARGIN.bottom;
    this.residSvg.attr("width", this.width).attr("height", RESID_HEIGHT);
    this.residGx.attr("transform", `translate(${MARGIN.left},${RESID_MARGIN.top + rh})`);
    this.residGy.attr("transform", `translate(${MARGIN.left},${RESID_MARGIN.top})`);
    this.sizeCanvas(this.residCanvas, this.plotW, rh, MARGIN.left, RESID_MARGIN.top);
    this.xBase.range([0, this.plotW]);
    this.yBase.range([this.plotH, 0]);
    this.invalidate("points", "curves", "groups", "handles", "axes", "resid");
  }

  private sizeCanvas(c: HTMLCanvasElement, w: number, h: number, left: number, top: number): void {
    const dpr = (typeof window !== "undefined" && window.devicePixelRatio) || 1;
    c.width = Math.round(w * dpr);
    c.height = Math.round(h * dpr);
    c.style.width = `${w}px`;
    c.style.height = `${h}px`;
    c.style.left = `${left}px`;
    c.style.top = `${top}px`;
  }

  private fitDomains(): void {
    const xLog = this.xScaleKind === "log";
    const yLog = this.yScaleKind === "log";
    this.xBase = makeScale(this.xScaleKind, paddedDomain(this.points.x, xLog, 0.05), [0, this.plotW]);
    this.yBase = makeScale(this.yScaleKind, paddedDomain(this.points.y, yLog, 0.08), [this.plotH, 0]);
    this.transform = zoomIdentity;
    // Keep d3-zoom's stored transform in step without firing a redraw per call.
    (this.svg.node() as SVGSVGElement & { __zoom?: ZoomTransform }).__zoom = zoomIdentity;
    this.invalidate("points", "curves", "groups", "handles", "axes", "resid");
  }

  // ------------------------------------------------------------------ drawing
  private invalidate(...parts: (keyof Plot["dirty"])[]): void {
    for (const p of parts) this.dirty[p] = true;
    if (this.frame === null && typeof requestAnimationFrame !== "undefined") {
      this.frame = requestAnimationFrame(() => {
        this.frame = null;
        this.draw();
      });
    }
  }

  private draw(): void {
    const d = this.dirty;
    const { x, y } = this.scales();
    if (d.axes) this.drawAxes(x, y);
    if (d.points) this.drawPoints(x, y);
    if (d.curves) this.drawCurves(x, y);
    if (d.groups) this.drawGroupCurves(x, y);
    if (d.handles) this.drawHandles(x, y);
    if (d.resid) this.drawResiduals(x);
    this.dirty = { points: false, curves: false, groups: false, handles: false, axes: false, resid: false };
  }

  private drawAxes(x: Lin, y: Lin): void {
    const nx = Math.max(2, Math.round(this.plotW / 90));
    const ny = Math.max(2, Math.round(this.plotH / 50));
    this.gx.call(axisBottom(x).ticks(nx).tickFormat(this.tickFormat(x, nx, this.xScaleKind)) as never);
    this.gy.call(axisLeft(y).ticks(ny).tickFormat(this.tickFormat(y, ny, this.yScaleKind)) as never);
  }

  /** Plain-number tick labels; on a log axis only as many as fit (d3 thins the minor ones). */
  private tickFormat(s: Lin, count: number, kind: Scale): (v: number | { valueOf(): number }) => string {
    const label = (v: number | { valueOf(): number }): string => tickLabel(Number(v));
    if (kind !== "log") return label;
    const thin = s.tickFormat(count, label as unknown as string) as unknown as (v: number) => string;
    return (v) => thin(Number(v));
  }

  private drawPoints(x: Lin, y: Lin): void {
    const ctx = this.canvas.getContext("2d");
    if (!ctx) return;
    const dpr = this.canvas.width / Math.max(1, this.plotW);
    ctx.setTransform(dpr, 0, 0, dpr, 0, 0);
    ctx.clearRect(0, 0, this.plotW, this.plotH);
    if (this.pointGroups !== null) {
      this.drawGroupPoints(ctx, x, y, this.pointGroups);
      return;
    }
    const { x: xs, y: ys, excluded, n } = this.points;
    const pointColour = cssVar(this.el, "--cw-point", "#3d3d3d");
    const excludedColour = cssVar(this.el, "--cw-excluded", "#a0a0a0");
    const meanColour = cssVar(this.el, "--cw-mean", "#1f1f1f");
    const r = n > 2000 ? 1.8 : 3;
    const included: number[] = [];
    const out: number[] = [];
    for (let i = 0; i < n; i++) (excluded[i] ? out : included).push(i);
    const thin = (idx: number[]): ArrayLike<number> => {
      if (idx.length <= THIN_ABOVE) return idx;
      const sx = Float64Array.from(idx, (i) => xs[i]!);
      const sy = Float64Array.from(idx, (i) => ys[i]!);
      const keep = decimateCells(sx, sy, this.plotW, this.plotH, (v) => x(v), (v) => y(v), 2);
      return Array.from(keep, (k) => idx[k]!);
    };
    ctx.globalAlpha = n > 2000 ? 0.6 : 0.85;
    ctx.fillStyle = pointColour;
    ctx.beginPath();
    const drawn = thin(included);
    for (let k = 0; k < drawn.length; k++) {
      const i = drawn[k]!;
      const px = x(xs[i]!);
      const py = y(ys[i]!);
      if (!Number.isFinite(px) || !Number.isFinite(py)) continue;
      ctx.moveTo(px + r, py);
      ctx.arc(px, py, r, 0, 2 * Math.PI);
    }
    ctx.fill();
    // Excluded points stay visible, hollow and lighter, so they can be clicked back in.
    ctx.globalAlpha = 1;
    ctx.strokeStyle = excludedColour;
    ctx.lineWidth = 1.2;
    ctx.beginPath();
    const drawnOut = thin(out);
    for (let k = 0; k < drawnOut.length; k++) {
      const i = drawnOut[k]!;
      const px = x(xs[i]!);
      const py = y(ys[i]!);
      if (!Number.isFinite(px) || !Number.isFinite(py)) continue;
      ctx.moveTo(px + r + 0.5, py);
      ctx.arc(px, py, r + 0.5, 0, 2 * Math.PI);
      ctx.moveTo(px - r, py - r);
      ctx.lineTo(px + r, py + r);
    }
    ctx.stroke();
    // Replicates: mean as a short bar, spread (one SD) as a vertical line.
    if (n <= 20000) {
      const skip = Array.from(excluded, (e) => e === 1);
      const groups = groupReplicates(xs, ys, skip);
      if (groups.some((g) => g.n > 1) && groups.length <= 400) {
        ctx.strokeStyle = meanColour;
        ctx.lineWidth = 1.5;
        ctx.beginPath();
        for (const g of groups) {
          if (g.n < 2) continue;
          const px = x(g.x);
          const pm = y(g.mean);
          if (!Number.isFinite(px) || !Number.isFinite(pm)) continue;
          ctx.moveTo(px - 6, pm);
          ctx.lineTo(px + 6, pm);
          const lo = y(g.mean - g.sd);
          const hi = y(g.mean + g.sd);
          if (Number.isFinite(lo) && Number.isFinite(hi)) {
            ctx.moveTo(px, lo);
            ctx.lineTo(px, hi);
          }
        }
        ctx.stroke();
      }
    }
  }

  /**
   * Points by group (by=): each group in its colour and marker, excluded rows hollow and grey,
   * groups left out of the fit hollow and faded, hidden groups not at all; replicate means and
   * spreads within each group.
   */
  private drawGroupPoints(ctx: CanvasRenderingContext2D, x: Lin, y: Lin, pg: PointGroups): void {
    const { x: xs, y: ys, excluded, n } = this.points;
    const r = n > 2000 ? 2.2 : 3.4;
    const excludedColour = cssVar(this.el, "--cw-excluded", "#a0a0a0");
    const byGroup: number[][] = pg.styles.map(() => []);
    for (let i = 0; i < n; i++) {
      const g = pg.index[i]!;
      if (g >= 0 && g < byGroup.length) byGroup[g]!.push(i);
    }
    const thin = (idx: number[]): ArrayLike<number> => {
      if (idx.length <= THIN_ABOVE) return idx;
      const sx = Float64Array.from(idx, (i) => xs[i]!);
      const sy = Float64Array.from(idx, (i) => ys[i]!);
      const keep = decimateCells(sx, sy, this.plotW, this.plotH, (v) => x(v), (v) => y(v), 2);
      return Array.from(keep, (k) => idx[k]!);
    };
    byGroup.forEach((idx, g) => {
      const { colour, marker } = pg.styles[g]!;
      const faded = pg.faded[g]!;
      const filled = new Path2D();
      const hollow = new Path2D();
      const out = new Path2D();
      const drawn = thin(idx);
      for (let k = 0; k < drawn.length; k++) {
        const i = drawn[k]!;
        const px = x(xs[i]!);
        const py = y(ys[i]!);
        if (!Number.isFinite(px) || !Number.isFinite(py)) continue;
        traceMarker(excluded[i] ? out : faded ? hollow : filled, marker, px, py, r);
      }
      ctx.globalAlpha = faded ? 0.45 : n > 2000 ? 0.6 : 0.9;
      ctx.fillStyle = colour;
      ctx.fill(filled);
      ctx.strokeStyle = colour;
      ctx.lineWidth = 1.3;
      ctx.stroke(hollow);
      ctx.globalAlpha = 1;
      ctx.strokeStyle = excludedColour;
      ctx.lineWidth = 1.2;
      ctx.stroke(out);
      if (n > 20000 || idx.length < 2) return;
      const skip = Array.from({ length: n }, (_, i) => excluded[i] === 1 || pg.index[i] !== g);
      const reps = groupReplicates(xs, ys, skip);
      if (!reps.some((q) => q.n > 1) || reps.length > 400) return;
      ctx.strokeStyle = colour;
      ctx.globalAlpha = faded ? 0.45 : 1;
      ctx.lineWidth = 1.5;
      ctx.beginPath();
      for (const q of reps) {
        if (q.n < 2) continue;
        const px = x(q.x);
        const pm = y(q.mean);
        if (!Number.isFinite(px) || !Number.isFinite(pm)) continue;
        ctx.moveTo(px - 6, pm);
        ctx.lineTo(px + 6, pm);
        const lo = y(q.mean - q.sd);
        const hi = y(q.mean + q.sd);
        if (Number.isFinite(lo) && Number.isFinite(hi)) {
          ctx.moveTo(px, lo);
          ctx.lineTo(px, hi);
        }
      }
      ctx.stroke();
      ctx.globalAlpha = 1;
    });
  }

  private drawGroupCurves(x: Lin, y: Lin): void {
    const sel = this.groupLayer
      .selectAll<SVGPathElement, GroupCurveView>("path")
      .data(this.groupCurves, (c) => c.label);
    sel.exit().remove();
    sel
      .enter()
      .append("path")
      .merge(sel)
      .attr("class", (c) => `cw-group-curve${c.excluded ? " cw-group-excluded" : ""}${c.fitted ? " cw-group-fitted" : ""}`)
      .attr("data-cw-group-curve", (c) => c.label)
      .attr("data-colour", (c) => c.colour)
      .style("stroke", (c) => c.colour)
      .attr("d", (c) => this.curvePathData(c.source, x, y));
  }

  private curvePathData(src: CurveSource, x: Lin, y: Lin): string {
    if (src === null) return "";
    let px: Float64Array;
    let py: Float64Array;
    if (src.kind === "fn") {
      // Two samples per pixel, evenly spaced on the axis (so in decades on a log axis).
      const m = Math.max(2, Math.round(this.plotW * 2));
      const [d0, d1] = x.domain() as [number, number];
      const xs = sampleAxis(d0, d1, this.xScaleKind === "log", m);
      let ys: Float64Array;
      try {
        ys = src.fn(xs);
      } catch {
        return "";
      }
      px = Float64Array.from(xs, (v) => x(v));
      py = Float64Array.from(ys, (v) => y(v));
    } else {
      const n = Math.min(src.x.length, src.y.length);
      px = new Float64Array(n);
      py = new Float64Array(n);
      for (let i = 0; i < n; i++) {
        const yv = src.y[i];
        px[i] = x(src.x[i]!);
        py[i] = typeof yv === "number" ? y(yv) : NaN;
      }
    }
    return pathFromPixels(px, py);
  }

  private bandPathData(b: BandView | null, x: Lin, y: Lin): string {
    if (b === null) return "";
    const n = b.x.length;
    const px = new Float64Array(n);
    const lo = new Float64Array(n);
    const hi = new Float64Array(n);
    // On a log y axis a bound at or below zero lies below any view: draw it past the bottom
    // edge (clipped) rather than breaking the band there.
    const floor = this.yScaleKind === "log" ? this.plotH + 20 : NaN;
    const py = (v: number): number => (this.yScaleKind === "log" && v <= 0 ? floor : y(v));
    for (let i = 0; i < n; i++) {
      px[i] = x(b.x[i]!);
      lo[i] = py(b.lower[i]!);
      hi[i] = py(b.upper[i]!);
    }
    return areaFromPixels(px, lo, hi);
  }

  private drawCurves(x: Lin, y: Lin): void {
    this.predictionPath.attr("d", this.bandPathData(this.bands.prediction, x, y));
    this.confidencePath.attr("d", this.bandPathData(this.bands.confidence, x, y));
    this.curvePath.attr("d", this.curvePathData(this.curve, x, y));
    this.fitPath.attr("d", this.curvePathData(this.fitted, x, y));
    const sel = this.compareGroup
      .selectAll<SVGPathElement, { name: string; source: CurveSource }>("path")
      .data(this.compared, (c) => c.name);
    sel.exit().remove();
    sel
      .enter()
      .append("path")
      .attr("class", "cw-curve-compare")
      .merge(sel)
      .attr("data-model", (c) => c.name)
      .attr("d", (c) => this.curvePathData(c.source, x, y));
  }

  private drawHandles(x: Lin, y: Lin): void {
    const sel = this.gHandles
      .selectAll<SVGGElement, HandleView>("g.cw-handle")
      .data(this.handles, (h) => h.key);
    sel.exit().remove();
    const entered = sel
      .enter()
      .append("g")
      .attr("class", "cw-handle")
      .attr("tabindex", 0)
      .attr("role", "slider")
      .attr("data-lm-suppress-shortcuts", "true")
      .attr("data-handle", (h) => h.key)
      .each((_, i, nodes) => this.wireHandle(nodes[i] as SVGGElement));
    entered.append("title"); // a native tooltip naming the feature for mouse users
    entered.append("circle").attr("class", "cw-handle-hit").attr("r", 13);
    entered.append("circle").attr("class", "cw-handle-dot").attr("r", 6.5);
    const all = entered.merge(sel);
    all.each((h, i, nodes) => {
      const g = nodes[i] as SVGGElement;
      let px = x(h.pos.x);
      let py = y(h.pos.y);
      const finite = Number.isFinite(px) && Number.isFinite(py);
      const inside = finite && px >= 0 && px <= this.plotW && py >= 0 && py <= this.plotH;
      // A handle outside the view stays reachable at the edge, drawn as off-view.
      if (!finite) {
        px = this.plotW / 2;
        py = this.plotH / 2;
      }
      px = Math.max(0, Math.min(this.plotW, px));
      py = Math.max(0, Math.min(this.plotH, py));
      g.setAttribute("transform", `translate(${px.toFixed(2)},${py.toFixed(2)})`);
      g.classList.toggle("cw-offview", !inside);
      g.classList.toggle("cw-pin", h.pin);
      g.setAttribute("aria-label", h.ariaLabel);
      const title = g.querySelector("title");
      if (title && title.textContent !== h.ariaLabel) title.textContent = h.ariaLabel;
      g.setAttribute("aria-valuenow", String(h.valueNow));
      g.setAttribute("aria-valuetext", h.valueText);
      g.dataset["x"] = String(h.pos.x);
      g.dataset["y"] = String(h.pos.y);
    });
  }

  private wireHandle(g: SVGGElement): void {
    const keyOf = (): string => g.getAttribute("data-handle") ?? "";
    let active: number | null = null;
    const target = (e: PointerEvent): Point => {
      const r = this.surface.node()!.getBoundingClientRect();
      return this.invert(e.clientX - r.left, e.clientY - r.top);
    };
    g.addEventListener("pointerdown", (e) => {
      if (e.button !== 0) return;
      e.preventDefault(); // also stops the compatibility mousedown that would start a pan
      e.stopPropagation();
      g.setPointerCapture(e.pointerId);
      g.focus({ preventScroll: true });
      active = e.pointerId;
      g.classList.add("cw-dragging");
      this.cb.onDrag(keyOf(), target(e), "start");
    });
    g.addEventListener("pointermove", (e) => {
      if (active !== e.pointerId) return;
      e.preventDefault();
      this.cb.onDrag(keyOf(), target(e), "move");
    });
    const end = (e: PointerEvent): void => {
      if (active !== e.pointerId) return;
      active = null;
      g.classList.remove("cw-dragging");
      if (g.hasPointerCapture(e.pointerId)) g.releasePointerCapture(e.pointerId);
      this.cb.onDrag(keyOf(), target(e), "end");
    };
    g.addEventListener("pointerup", end);
    g.addEventListener("pointercancel", end);
    g.addEventListener("click", (e) => e.stopPropagation()); // not a point click
    g.addEventListener("keydown", (e) => {
      const step = e.shiftKey ? 0.1 : 0.01;
      let dx = 0;
      let dy = 0;
      if (e.key === "ArrowLeft") dx = -step * this.plotW;
      else if (e.key === "ArrowRight") dx = step * this.plotW;
      else if (e.key === "ArrowUp") dy = -step * this.plotH;
      else if (e.key === "ArrowDown") dy = step * this.plotH;
      else return;
      e.preventDefault();
      e.stopPropagation();
      this.cb.onNudge(keyOf(), dx, dy);
    });
  }

  private drawResiduals(x: Lin): void {
    const rh = RESID_HEIGHT - RESID_MARGIN.top - RESID_MARGIN.bottom;
    const res = this.residuals;
    const ctx = this.residCanvas.getContext("2d");
    if (res === null || !ctx) return;
    const { x: xs, excluded } = this.points;
    let maxAbs = 0;
    for (let i = 0; i < res.length; i++) {
      const v = res[i]!;
      if (Number.isFinite(v) && !excluded[i]) maxAbs = Math.max(maxAbs, Math.abs(v));
    }
    if (maxAbs === 0) maxAbs = 1;
    const ry = scaleLinear().domain([-maxAbs * 1.1, maxAbs * 1.1]).range([rh, 0]);
    this.residGx.call(axisBottom(x).ticks(Math.max(2, Math.round(this.plotW / 90)))
        .tickFormat(this.tickFormat(x, Math.max(2, Math.round(this.plotW / 90)), this.xScaleKind)) as never);
    this.residGy.call(axisLeft(ry).ticks(3).tickFormat((v) => tickLabel(Number(v))) as never);
    this.residZero
      .attr("x1", MARGIN.left)
      .attr("x2", MARGIN.left + this.plotW)
      .attr("y1", RESID_MARGIN.top + ry(0))
      .attr("y2", RESID_MARGIN.top + ry(0));
    const dpr = this.residCanvas.width / Math.max(1, this.plotW);
    ctx.setTransform(dpr, 0, 0, dpr, 0, 0);
    ctx.clearRect(0, 0, this.plotW, rh);
    const n = Math.min(res.length, xs.length);
    const r = n > 2000 ? 1.5 : 2.5;
    // With groups the residuals are the selected group's: drawn in its colour.
    ctx.fillStyle = cssVar(this.el, this.pointGroups !== null ? "--cw-fit" : "--cw-point", "#3d3d3d");
    ctx.strokeStyle = cssVar(this.el, "--cw-excluded", "#a0a0a0");
    const filled = new Path2D();
    const hollow = new Path2D();
    for (let i = 0; i < n; i++) {
      const px = x(xs[i]!);
      const py = ry(res[i]!);
      if (!Number.isFinite(px) || !Number.isFinite(py) || px < 0 || px > this.plotW) continue;
      const p = excluded[i] ? hollow : filled;
      p.moveTo(px + r, py);
      p.arc(px, py, r, 0, 2 * Math.PI);
    }
    ctx.globalAlpha = n > 2000 ? 0.6 : 0.85;
    ctx.fill(filled);
    ctx.globalAlpha = 1;
    ctx.stroke(hollow);
  }

  // ------------------------------------------------------------------ point selection
  private rowsInBox(x0: number, y0: number, x1: number, y1: number): number[] {
    const { x, y } = this.scales();
    const rows: number[] = [];
    const { x: xs, y: ys, row, n } = this.points;
    for (let i = 0; i < n; i++) {
      if (!this.shown(i)) continue;
      const px = x(xs[i]!);
      const py = y(ys[i]!);
      if (px >= x0 && px <= x1 && py >= y0 && py <= y1) rows.push(row[i]!);
    }
    return rows;
  }

  private brushEnded(event: D3BrushEvent<unknown>): void {
    const s = event.selection as [[number, number], [number, number]] | null;
    if (!s || !event.sourceEvent) return; // our own clearing below
    const rows = this.rowsInBox(s[0][0], s[0][1], s[1][0], s[1][1]);
    this.gBrush.call(this.brusher.move, null);
    this.suppressClick = true;
    setTimeout(() => (this.suppressClick = false), 0);
    if (rows.length > 0) this.cb.onToggleRows(rows);
  }

  private clicked(event: MouseEvent): void {
    if (event.defaultPrevented || event.shiftKey || this.suppressClick) return;
    const r = this.surface.node()!.getBoundingClientRect();
    const cx = event.clientX - r.left;
    const cy = event.clientY - r.top;
    if (cx < 0 || cy < 0 || cx > this.plotW || cy > this.plotH) return;
    const { x, y } = this.scales();
    const { x: xs, y: ys, row, n } = this.points;
    let best = -1;
    let bestD = 7 * 7; // click within 7 px of a point
    for (let i = 0; i < n; i++) {
      if (!this.shown(i)) continue;
      const dx = x(xs[i]!) - cx;
      const dy = y(ys[i]!) - cy;
      const d = dx * dx + dy * dy;
      if (d < bestD) {
        bestD = d;
        best = i;
      }
    }
    if (best >= 0) this.cb.onToggleRows([row[best]!]);
  }
}
