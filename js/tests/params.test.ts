// js/params.ts against the one description of a parameter record, the JSON Schema in
// src/curvewright/params_spec.json (which Python checks its Parameter against at import), and
// against records Python wrote (tests/data/params_vectors.json, made by
// tools/gen_params_vectors.py and checked fresh by tests/test_parameters.py).
import { readFileSync } from "node:fs";
import { describe, expect, it } from "vitest";
import spec from "../../src/curvewright/params_spec.json";
import { FIELD_TYPES, PARAM_FIELDS, ParamsError, SCOPES, byName, readParams, toList } from "../params";

const vectors = JSON.parse(readFileSync(new URL("../../tests/data/params_vectors.json", import.meta.url), "utf-8")) as {
  valid: Record<string, unknown[]>;
  invalid: Record<string, unknown>;
};

describe("the ParamRecord type mirrors params_spec.json", () => {
  it("has the schema's fields, in its order, all required, nothing else", () => {
    expect(PARAM_FIELDS).toEqual(Object.keys(spec.properties));
    expect([...spec.required]).toEqual(Object.keys(spec.properties));
    expect(Object.keys(FIELD_TYPES).sort()).toEqual([...PARAM_FIELDS].sort());
    expect(spec.additionalProperties).toBe(false);
  });

  it("gives every field the schema's JSON type", () => {
    for (const [name, schema] of Object.entries(spec.properties) as [keyof typeof FIELD_TYPES, { type?: string | string[]; enum?: string[] }][]) {
      const want = schema.enum !== undefined ? ["string"] : [schema.type].flat();
      expect([...FIELD_TYPES[name]].sort(), name).toEqual([...(want as string[])].sort());
    }
    expect([...SCOPES]).toEqual(spec.properties.scope.enum);
  });
});

describe("readParams reads what Python writes and refuses what Python refuses", () => {
  it("reads every valid list unchanged, and byName/toList keep it", () => {
    for (const [name, records] of Object.entries(vectors.valid)) {
      const got = readParams(records);
      expect(got, name).toEqual(records);
      expect(toList(byName(got)), name).toEqual(records);
    }
  });

  it("refuses every invalid record", () => {
    for (const [name, record] of Object.entries(vectors.invalid)) {
      expect(() => readParams([record]), name).toThrow(ParamsError);
    }
    expect(() => readParams({ k: {} })).toThrow(/must be a list of records/);
  });
});
