// Checking what a person types into the parameter panel, and formatting numbers for display.
// Pure: no DOM. An edit that fails a check is shown inline and never sent to Python.

import type { ParamInfo, Setting } from "./state";

export type FieldKind = "value" | "lower" | "upper";

export type Parsed = { ok: true; value: number | null } | { ok: false; message: string };

const NUMBER_RE = /^[+-]?(\d+\.?\d*|\.\d+)([eE][+-]?\d+)?$/;
const INF_RE = /^([+-]?)(inf|infinity|∞)$/i;

/**
 * Parse one field. A value must be a finite number; a bound may be empty (no bound) or ±inf.
 * Accepts a comma as the decimal separator when there is no dot ("0,5").
 */
export function parseField(text: string, kind: FieldKind): Parsed {
  let t = text.trim().replace(/\u2212/g, "-");
  if (!t.includes(".") && /^[+-]?\d*,\d+([eE][+-]?\d+)?$/.test(t)) t = t.replace(",", ".");
  if (t === "") {
    return kind === "value"
      ? { ok: false, message: "enter a number" }
      : { ok: true, value: null };
  }
  const inf = INF_RE.exec(t);
  if (inf) {
    if (kind === "value") return { ok: false, message: "the value must be finite" };
    const negative = inf[1] === "-";
    if (kind === "lower" && !negative) return { ok: false, message: "a lower bound cannot be +inf" };
    if (kind === "upper" && negative) return { ok: false, message: "an upper bound cannot be -inf" };
    return { ok: true, value: null };
  }
  if (!NUMBER_RE.test(t)) return { ok: false, message: `"${text.trim()}" is not a number` };
  const v = Number(t);
  if (!Number.isFinite(v)) return { ok: false, message: `${t} is too large` };
  return { ok: true, value: v };
}

/**
 * Check a whole setting after one field changed: lower <= upper, a free value inside the bounds,
 * and no negative value or lower bound for a parameter the model declares positive. This is
 * the page's inline mirror of the one validator, Python's Parameters.validated (which checks
 * every record the page sends again); it exists so a typo is marked where it is typed. Returns
 * a message, or null when the setting is acceptable.
 */
export function checkSetting(info: Pick<ParamInfo, "name" | "positive">, s: Setting): string | null {
  const lo = s.lower ?? -Infinity;
  const hi = s.upper ?? Infinity;
  const v = s.value;
  if (v === null || !Number.isFinite(v)) return "the value must be a finite number";
  if (lo > hi) return `lower bound ${formatNumber(lo)} is above upper bound ${formatNumber(hi)}`;
  // A fixed value is the user's statement, not a start: Python's Parameters.validated does
  // not hold it to the bounds either.
  if (!s.fixed && (v < lo || v > hi)) {
    return `${formatNumber(v)} lies outside the bounds [${formatNumber(lo)}, ${formatNumber(hi)}]`;
  }
  if (info.positive && (v < 0 || lo < 0)) {
    return `${info.name} is positive: value and lower bound must not be negative`;
  }
  return null;
}

/** A compact, round-trippable-enough display of a number (6 significant digits). */
export function formatNumber(v: number | null | undefined, digits = 6): string {
  if (v === null || v === undefined || Number.isNaN(v)) return "";
  if (v === Infinity) return "inf";
  if (v === -Infinity) return "-inf";
  if (v === 0) return "0";
  const a = Math.abs(v);
  const s = a >= 1e-3 && a < 1e6 ? v.toPrecision(digits) : v.toExponential(digits - 1);
  // Drop trailing zeros of the mantissa ("1.50000e-6" -> "1.5e-6", "2.00000" -> "2").
  return s.replace(/(\.\d*?)0+(e|$)/, "$1$2").replace(/\.(e|$)/, "$1");
}

/**
 * An axis tick label: plain decimals between 0.001 and 100000 ("0.25", "100"), exponent form
 * outside ("1e-9", "2.5e+6"); never SI prefixes, which read ambiguously next to units.
 */
export function tickLabel(v: number): string {
  if (!Number.isFinite(v)) return "";
  if (v === 0) return "0";
  const a = Math.abs(v);
  // 12 significant digits hide the binary noise of tick arithmetic (0.30000000000000004).
  if (a >= 1e-3 && a < 1e5) return String(Number(v.toPrecision(12)));
  return Number(v.toPrecision(12))
    .toExponential()
    .replace(/\.?0+e/, "e");
}
