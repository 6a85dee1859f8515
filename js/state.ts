// Python-synced state: the widget's traitlets as the front end sees them (one interface, the
// model type of render()), the custom messages both ways, and pure helpers that read the synced
// values into plain arrays. Nothing here is UI-only; that lives in ui-state.ts.

import type { ExprNode } from "./expr";
import type { ParamRecord, Setting } from "./params";

export type { ParamRecord, Setting } from "./params";

export type Scale = "linear" | "log";
export type Domain = "all" | "x>0" | "x>=0";

/** One parameter as the model describes it (bounds `null` = none; JSON has no infinity). */
export interface ParamInfo {
  name: string;
  value: number;
  lower: number | null;
  upper: number | null;
  fixed?: boolean;
  log_scale: boolean;
  positive: boolean;
  unit: string;
  description: string;
}

/** A draggable curve feature: its position as trees of the parameters, and what it moves. */
export interface HandleInfo {
  name: string;
  label: string;
  x: ExprNode;
  y: ExprNode;
  moves: string[];
  x_formula?: string;
  y_formula?: string;
}

/** A quantity computed from the parameters (EC50 on a log scale, a half-life...). */
export interface DerivedInfo {
  name: string;
  formula?: string;
  tree: ExprNode;
  description?: string;
  unit?: string;
  axis?: "x" | "y" | null;
}

/** The `model_json` trait: the current model as data (Model.to_dict() on the Python side). */
export interface ModelJson {
  name: string;
  formula: string | null;
  /** Expression tree of x and the parameters; null for a Python-callable model. */
  tree: ExprNode | null;
  params: ParamInfo[];
  handles: HandleInfo[];
  domain: Domain;
  /** The curve can be evaluated in the browser (a formula model). */
  has_preview: boolean;
  derived?: DerivedInfo[];
  description?: string;
}

/** The `data` trait: the points to draw (possibly a shape-keeping subset of all points). */
export interface DataJson {
  /** x and y of the drawn points; null where a value is not finite. */
  x: (number | null)[];
  y: (number | null)[];
  /**
   * Excluded points: either input-row indices (matched against `row`), or one boolean per drawn
   * point. Both forms are accepted (see readData).
   */
  excluded: number[] | boolean[];
  x_label: string;
  y_label: string;
  /** Input-row index of each drawn point (default: its position). */
  row?: number[];
  sigma?: (number | null)[] | null;
  /** Number of input points before any thinning for display. */
  n_total?: number;
  /** Number of input rows (NaN rows included); row numbers run from 0 to n_input - 1. */
  n_input?: number;
  decimated?: boolean;
  /** Input rows not drawable on the current axes (x <= 0 on log x, y <= 0 on log y). */
  off_axis?: number[];
  /** Input rows outside the model's domain. */
  outside_domain?: number[];
}

/** The `fitted` trait after a fit; `null` before the first fit of the current model. */
export interface FittedJson {
  values: Record<string, number>;
  stderr: Record<string, number | null>;
  ci_low: Record<string, number | null>;
  ci_high: Record<string, number | null>;
  /** Per parameter, flag codes such as "at_lower", "at_upper", "not_identified". */
  flags: Record<string, string[]>;
  /** The fitted curve sampled by Python (used when the model has no tree). */
  curve: { x: number[]; y: (number | null)[] };
  /** Residual (y - fitted) of each drawn point, in the order of `data`; null where none. */
  residuals: (number | null)[];
  /** Optional extras a fit may report. */
  message?: string;
  model_name?: string;
  ci_level?: number;
  success?: boolean;
  code?: string;
  /** Derived quantities with delta-method intervals; `extrapolated` outside the data's x. */
  derived?: {
    name: string;
    value: number | null;
    stderr: number | null;
    lower: number | null;
    upper: number | null;
    unit: string;
    extrapolated: boolean;
  }[];
  stats?: {
    n: number;
    dof: number;
    ssr: number | null;
    r2: number | null;
    aicc: number | null;
    sigma_resid: number | null;
    evaluations: number;
  };
  /** Input rows the fit left out. */
  excluded?: number[];
  diagnostics?: { code: string; severity: string; text: string }[];
  /** The research-use caution every report carries. */
  caution?: string;
}

/** The latest fit of one model, for comparing models (the `compare` trait). */
export interface CompareJson {
  model_name: string;
  current: boolean;
  success: boolean;
  nfree: number;
  n: number;
  ssr: number | null;
  r2: number | null;
  aicc: number | null;
  curve: { x: number[]; y: (number | null)[] };
}

/** Model comparison (Python's stats.compare(...).to_dict()), or why the fits cannot be compared. */
export interface ComparisonJson {
  table: { fit: string; akaike_weight: number | null; delta_aicc: number | null }[];
  f_tests: {
    simpler: string;
    larger: string;
    F: number | null;
    p: number | null;
    df_num: number;
    df_den: number;
    significant: boolean;
  }[];
  preferred: string;
  criterion: string;
  recommendation: string;
  reasoning: string[];
  alpha: number;
  caution: string;
}

/** Lower and upper bound of one band at each grid x; null where not finite. */
export interface BandJson {
  lower: (number | null)[];
  upper: (number | null)[];
}

/**
 * The `bands_json` trait: the shown fit's pointwise bands on the fitted curve's x grid (evenly
 * spaced on the x axis, so in decades on a log axis), for the toggles that are on; null when
 * both are off or the model has no fit. A band Python could not compute is null and `note`
 * says why.
 */
export interface BandsJson {
  model_name: string;
  level: number;
  x: (number | null)[];
  confidence: BandJson | null;
  prediction: BandJson | null;
  note: string;
}

/** One degree of the polynomial degree table (Python's select_degree(...).table). */
export interface DegreeRowJson {
  degree: number;
  /** Extra-sum-of-squares F of the added power against the degree below; null if infinite. */
  F: number | null;
  df_num: number;
  df_den: number;
  p: number | null;
  aicc: number | null;
  bic: number | null;
  r2: number | null;
  r2_adj: number | null;
  ssr: number | null;
}

/**
 * The `degree_table_json` trait for a polynomial model: the degree table on the included
 * points, or why there is none, or (large data) a table that waits to be asked for with a
 * `degree_table` message; null for other models.
 */
export type DegreeTableJson =
  | {
      current: number;
      suggested: number;
      alpha: number;
      max_degree: number;
      n: number;
      weighting: string;
      reasoning: string;
      rows: DegreeRowJson[];
      warnings: string[];
    }
  | { current: number; error: string }
  | { current: number; deferred: true; n: number };

/** "stopped": the fit ended without converging (cancelled, time or evaluation limit). */
export type FitState = "idle" | "fitting" | "done" | "stopped" | "error";

export interface StatusJson {
  state: FitState;
  message: string;
}

/**
 * The widget's synced traitlets (Python side: the widget class in src/curvewright/widget/).
 * The front end writes `params`, `excluded`, `x_scale`, `y_scale`, `model_name`, `error`
 * (cleared by the dismiss button), `sync_ping` and the three display toggles `show_*`; Python
 * writes the rest.
 */
export interface WidgetModel {
  model_json: ModelJson;
  data: DataJson;
  /** The parameter records (Python's Parameters.to_json(); js/params.ts, params_spec.json). */
  params: ParamRecord[];
  fitted: FittedJson | null;
  x_scale: Scale;
  y_scale: Scale;
  model_names: string[];
  model_name: string;
  status: StatusJson;
  error: string;
  /** Excluded input rows (sorted); the front end sets it when points are clicked or boxed. */
  excluded: number[];
  /**
   * For a model without a tree (a Python callable): the curve for the current `params`,
   * computed by the kernel (throttled), or null.
   */
  preview_curve: { x: number[]; y: (number | null)[] } | null;
  /** The latest fit of every model fitted so far. */
  compare: CompareJson[];
  /** Comparison of the latest converged fit of each model; null with fewer than two. */
  comparison_json: ComparisonJson | { error: string } | null;
  /** Display toggles (checkboxes on the page; Python may set them too). */
  show_confidence_band: boolean;
  show_prediction_band: boolean;
  show_residuals: boolean;
  /** The shown fit's bands for the toggles that are on. */
  bands_json: BandsJson | null;
  /** The polynomial degree table, for polynomial models only. */
  degree_table_json: DegreeTableJson | null;
  /** Flush: the page sets sync_ping, Python answers by setting sync_pong to the same number. */
  sync_ping: number;
  sync_pong: number;
  /** With by=: the groups as the page draws them (js/groups.ts GroupsJson), else null. */
  groups_json: unknown;
  /** Made on a batch: every group for the review (js/review.ts ReviewJson), else null. */
  review_json: unknown;
  /** Made on a batch: the review's filter, open group and whether its refit can be accepted. */
  review_state: unknown;
}

/** Messages the front end sends with model.send(). */
export type FrontMessage =
  | {
      type: "fit";
      /** The state the page shows, applied by Python before fitting (see widget.ts). */
      model_name?: string;
      params?: ParamRecord[];
      excluded?: number[];
    }
  | { type: "cancel" }
  | { type: "guided_start" }
  /** Groups (by=): each calls the Python method of the same name. */
  | { type: "select_group"; label: string }
  | { type: "hide_group"; label: string; hidden: boolean }
  | { type: "exclude_group"; label: string; excluded: boolean }
  | { type: "set_scope"; name: string; scope: "shared" | "per_group" }
  /** Review of a batch: each calls the Python method of the same name. */
  | { type: "review_open"; label: string }
  | { type: "review_filter"; filter: "all" | "failed" | "flagged" }
  | { type: "review_sort"; key: string }
  | { type: "review_accept" }
  /** A row of the degree table picked: show the polynomial of this degree. */
  | { type: "use_degree"; degree: number }
  /** Large data: compute the degree table now. */
  | { type: "degree_table" }
  | { type: "preview"; values: Record<string, number>; x_min: number; x_max: number }
  | {
      type: "pins";
      /** Callable models: the points the curve should pass through; Python solves. */
      pins: [number, number][];
      values: Record<string, number>;
      x_min: number;
      x_max: number;
      /** The end of a drag: Python makes the solved values the parameters' values. */
      final: boolean;
      seq: number;
    };

// ---------------------------------------------------------------------------------------------
// Reading synced values
// ---------------------------------------------------------------------------------------------

/** The drawn points as typed arrays (NaN for null), their input rows and exclusion flags. */
export interface PointSet {
  x: Float64Array;
  y: Float64Array;
  row: Int32Array;
  excluded: Uint8Array;
  n: number;
}

function toFloat(values: readonly (number | null | undefined)[] | undefined, n: number): Float64Array {
  const out = new Float64Array(n);
  for (let i = 0; i < n; i++) {
    const v = values?.[i];
    out[i] = typeof v === "number" ? v : NaN;
  }
  return out;
}

/**
 * Read the `data` trait (and the `excluded` trait, which wins when present) into a PointSet.
 * `excludedRows` is the `excluded` trait value (input rows) or undefined.
 */
export function readData(data: DataJson | null | undefined, excludedRows?: readonly number[]): PointSet {
  const n = Math.min(data?.x?.length ?? 0, data?.y?.length ?? 0);
  const x = toFloat(data?.x, n);
  const y = toFloat(data?.y, n);
  const row = new Int32Array(n);
  for (let i = 0; i < n; i++) row[i] = data?.row?.[i] ?? i;
  const excluded = new Uint8Array(n);
  const ex = excludedRows ?? data?.excluded ?? [];
  if (ex.length > 0 && typeof ex[0] === "boolean") {
    for (let i = 0; i < n; i++) excluded[i] = (ex as boolean[])[i] ? 1 : 0;
  } else {
    const set = new Set(ex as number[]);
    for (let i = 0; i < n; i++) excluded[i] = set.has(row[i]!) ? 1 : 0;
  }
  return { x, y, row, excluded, n };
}

/** Bounds from a setting as numbers (null = unbounded). */
export function boundsOf(s: Setting | undefined): [number, number] {
  const lo = s?.lower;
  const hi = s?.upper;
  return [typeof lo === "number" ? lo : -Infinity, typeof hi === "number" ? hi : Infinity];
}

/** Current values of every parameter: the `params` trait, else the model's defaults. */
export function valuesOf(
  model: ModelJson | null | undefined,
  params: Readonly<Record<string, Setting>> | null | undefined,
): Record<string, number> {
  const out: Record<string, number> = {};
  for (const p of model?.params ?? []) {
    const s = params?.[p.name];
    out[p.name] = typeof s?.value === "number" ? s.value : p.value;
  }
  return out;
}

/** Rows that toggle when the user clicks or boxes `rows`: all re-included if all are excluded. */
export function toggleRows(current: readonly number[], rows: readonly number[]): number[] {
  const set = new Set(current);
  const allExcluded = rows.length > 0 && rows.every((r) => set.has(r));
  for (const r of rows) {
    if (allExcluded) set.delete(r);
    else set.add(r);
  }
  return [...set].sort((a, b) => a - b);
}
