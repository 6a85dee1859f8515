// Judging a fit on the page, pure logic (no DOM): which of the shown fit's bands to draw, and
// the polynomial degree table's rows as display text. The numbers come from Python
// (bands_json, degree_table_json in state.ts); nothing here computes statistics.

import type { BandJson, BandsJson, DegreeRowJson, DegreeTableJson } from "./state";
import { formatNumber } from "./validate";

/** One band as arrays over its x grid (NaN where a bound is not finite). */
export interface BandView {
  x: Float64Array;
  lower: Float64Array;
  upper: Float64Array;
}

export interface BandViews {
  confidence: BandView | null;
  prediction: BandView | null;
}

function toFloat(v: readonly (number | null)[], n: number): Float64Array {
  const out = new Float64Array(n);
  for (let i = 0; i < n; i++) {
    const a = v[i];
    out[i] = typeof a === "number" ? a : NaN;
  }
  return out;
}

function view(x: readonly (number | null)[], b: BandJson | null): BandView | null {
  if (b === null) return null;
  const n = Math.min(x.length, b.lower.length, b.upper.length);
  if (n < 2) return null;
  return { x: toFloat(x, n), lower: toFloat(b.lower, n), upper: toFloat(b.upper, n) };
}

/**
 * The bands to draw: those Python sent for the model shown whose toggle is on now (a toggle
 * switched off hides its band at once, before Python's answer arrives).
 */
export function bandViews(
  bands: BandsJson | null | undefined,
  modelName: string,
  showConfidence: boolean,
  showPrediction: boolean,
): BandViews {
  if (!bands || bands.model_name !== modelName) return { confidence: null, prediction: null };
  return {
    confidence: showConfidence ? view(bands.x, bands.confidence) : null,
    prediction: showPrediction ? view(bands.x, bands.prediction) : null,
  };
}

/** Which bands are drawn, as the root's data-cw-bands value ("confidence prediction", ""...). */
export function bandsDrawn(v: BandViews): string {
  return [v.confidence ? "confidence" : "", v.prediction ? "prediction" : ""].filter(Boolean).join(" ");
}

const DEGREE_NAMES: Record<number, string> = { 0: "constant", 1: "straight line", 2: "quadratic", 3: "cubic" };

/** "2 (quadratic)", "5". */
export function degreeLabel(degree: number): string {
  const name = DEGREE_NAMES[degree];
  return name ? `${degree} (${name})` : String(degree);
}

/** Column headers of the degree table, in the order of DegreeRow.cells. */
export const DEGREE_COLUMNS = ["degree", "F (added term)", "df", "p", "AICc", "BIC", "R²"] as const;

export interface DegreeRow {
  degree: number;
  /** Text of the cells after the degree: F, df, p, AICc, BIC, R². */
  cells: string[];
  suggested: boolean;
  current: boolean;
  /** The added term's F test is significant at the table's alpha. */
  significant: boolean;
}

function lowest(rows: readonly DegreeRowJson[], key: "aicc" | "bic"): number | null {
  let best: number | null = null;
  let at: number | null = null;
  for (const r of rows) {
    const v = r[key];
    if (typeof v === "number" && (best === null || v < best)) {
      best = v;
      at = r.degree;
    }
  }
  return at;
}

/**
 * The rows of a degree table as display text; the lowest AICc and BIC are marked. An infinite
 * F (a perfect fit) arrives as null and reads "inf" (its p is 0).
 */
export function degreeRows(t: DegreeTableJson): DegreeRow[] {
  if (!("rows" in t)) return [];
  const aicc = lowest(t.rows, "aicc");
  const bic = lowest(t.rows, "bic");
  return t.rows.map((r) => ({
    degree: r.degree,
    cells: [
      r.F === null ? (r.p === 0 ? "inf" : "–") : formatNumber(r.F, 4),
      `${r.df_num}, ${r.df_den}`,
      r.p === null ? "–" : formatNumber(r.p, 3),
      `${formatNumber(r.aicc, 5)}${r.degree === aicc ? " (lowest)" : ""}`,
      `${formatNumber(r.bic, 5)}${r.degree === bic ? " (lowest)" : ""}`,
      formatNumber(r.r2, 4),
    ],
    suggested: r.degree === t.suggested,
    current: r.degree === t.current,
    significant: typeof r.p === "number" && r.p < t.alpha,
  }));
}

/** The table's caption: what was tested, on which points, with which weights. */
export function degreeCaption(t: DegreeTableJson): string {
  if (!("rows" in t)) return "Polynomial degree";
  const weights = t.weighting === "none" ? "" : `, weighted as the fit is (${t.weighting})`;
  return (
    `Polynomial degree: each added power of x tested against the fit one degree lower ` +
    `(F test, α = ${t.alpha}) on the ${t.n} included points${weights}`
  );
}

/** One line naming the suggested degree (the reasoning follows it on the page). */
export function degreeSuggestion(t: DegreeTableJson): string {
  if ("error" in t) return `No degree table: ${t.error}`;
  if ("deferred" in t) {
    return `The degree table fits every degree to all ${t.n.toLocaleString("en-US")} included points; it is computed when asked for.`;
  }
  if (t.suggested === 0) return "Suggested: a constant (degree 0), which is not offered as a model here; see the reasoning.";
  return `Suggested degree: ${degreeLabel(t.suggested)}${t.suggested === t.current ? " — the model shown" : ""}.`;
}
