// Python-synced state: the parameter record, the one setting per parameter that Python's
// curvewright.parameters.Parameter is, as the `params` trait and the Fit message carry it (a list
// of records, Parameters.to_json()). Pure: no DOM.
//
// The JSON form is written down once, as a JSON Schema in src/curvewright/params_spec.json,
// which Python reads (importing curvewright fails while the record and the schema differ) and
// esbuild bundles in here. The interface below is checked against that file: `npm run
// typecheck` fails when a field is added to or dropped from one side only, and
// js/tests/params.test.ts checks the types, the required list, the scopes and readParams
// against it.

import spec from "../src/curvewright/params_spec.json";

/** In a fit of several groups: one value for all groups, or one per group. */
export type Scope = "shared" | "per_group";

/** One parameter's setting (params_spec.json); bounds `null` = none, JSON has no infinity. */
export interface ParamRecord {
  name: string;
  /** The start (or, after a fit, the estimate); null when not a number yet. */
  value: number | null;
  lower: number | null;
  upper: number | null;
  fixed: boolean;
  /** An expression of other parameters giving this one's value, or null. */
  link: string | null;
  scope: Scope;
}

/** The part of a record the page edits and the solvers read. */
export type Setting = Pick<ParamRecord, "value" | "lower" | "upper" | "fixed">;

type SpecField = keyof typeof spec.properties;
// Both directions, so a field on one side only is a type error here.
type Same<A, B> = [A] extends [B] ? ([B] extends [A] ? true : false) : false;
const FIELDS_MATCH: Same<keyof ParamRecord, SpecField> = true;
void FIELDS_MATCH;

/** The JSON type of each field, as the schema names them (checked against it in the tests). */
export const FIELD_TYPES: Readonly<Record<keyof ParamRecord, readonly string[]>> = {
  name: ["string"],
  value: ["number", "null"],
  lower: ["number", "null"],
  upper: ["number", "null"],
  fixed: ["boolean"],
  link: ["string", "null"],
  scope: ["string"],
};

/** The fields in the schema's order. */
export const PARAM_FIELDS = Object.keys(spec.properties) as (keyof ParamRecord)[];
export const SCOPES: readonly Scope[] = ["shared", "per_group"];

/** Raised for a `params` value that is not a list of records of the schema. */
export class ParamsError extends Error {
  constructor(message: string) {
    super(message);
    this.name = "ParamsError";
  }
}

function jsonType(v: unknown): string {
  if (v === null) return "null";
  if (typeof v === "number") return "number";
  return typeof v;
}

/** Check a `params` trait value against the schema; the records as they are, or ParamsError. */
export function readParams(raw: unknown): ParamRecord[] {
  if (!Array.isArray(raw)) throw new ParamsError(`params must be a list of records, got ${jsonType(raw)}`);
  return raw.map((r: unknown, i) => {
    if (typeof r !== "object" || r === null || Array.isArray(r)) {
      throw new ParamsError(`params[${i}] must be a record, got ${jsonType(r)}`);
    }
    const rec = r as Record<string, unknown>;
    for (const k of Object.keys(rec)) {
      if (!(PARAM_FIELDS as string[]).includes(k)) throw new ParamsError(`params[${i}]: unknown field ${k}`);
    }
    for (const k of PARAM_FIELDS) {
      if (!(k in rec)) throw new ParamsError(`params[${i}]: missing field ${k}`);
      if (!FIELD_TYPES[k].includes(jsonType(rec[k]))) {
        throw new ParamsError(`params[${i}].${k} must be ${FIELD_TYPES[k].join(" or ")}, got ${jsonType(rec[k])}`);
      }
    }
    if (!(SCOPES as readonly unknown[]).includes(rec["scope"])) {
      throw new ParamsError(`params[${i}].scope must be one of ${SCOPES.join(", ")}`);
    }
    return rec as unknown as ParamRecord;
  });
}

/** The records by name (in their order), for lookups; null or missing input gives none. */
export function byName(records: readonly ParamRecord[] | null | undefined): Record<string, ParamRecord> {
  const out: Record<string, ParamRecord> = {};
  for (const r of records ?? []) out[r.name] = r;
  return out;
}

/** The list the `params` trait and the Fit message carry, in the records' order. */
export function toList(records: Readonly<Record<string, ParamRecord>>): ParamRecord[] {
  return Object.values(records).map((r) => ({ ...r }));
}

/** A record for a parameter the page has no setting for: the model's own value and bounds. */
export function defaultRecord(info: { name: string; value: number; lower: number | null; upper: number | null; fixed?: boolean }): ParamRecord {
  return {
    name: info.name,
    value: info.value,
    lower: info.lower,
    upper: info.upper,
    fixed: info.fixed ?? false,
    link: null,
    scope: "shared",
  };
}
