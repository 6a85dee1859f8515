// Evaluates curvewright's JSON expression tree (the contract in DEVELOPERS.md) with numpy's
// float semantics, for live preview in the browser. Pure: no DOM, no widget state.
//
// A tree is validated strictly first (node types, operators, functions, names), then compiled
// once into JavaScript source built only from that validated tree (names become array slots,
// numbers become literals, nothing from the wire is pasted in as code). Where `new Function`
// is forbidden (a strict Content-Security-Policy), an equivalent closure tree is used instead.
//
// The function whitelist, the constants and the depth limit come from the same JSON file the
// Python side reads (src/curvewright/expr_spec.json), bundled in by esbuild; the function and
// constant names below are typed from it, so `npm run typecheck` fails if FNS stops covering
// exactly the spec's functions.

import spec from "../src/curvewright/expr_spec.json";

export type BinOp = "+" | "-" | "*" | "/" | "**";
export type FnName = keyof typeof spec.functions;
export type ConstName = keyof typeof spec.constants;

export type ExprNode =
  | { type: "num"; value: number }
  | { type: "name"; id: string }
  | { type: "const"; id: ConstName }
  | { type: "neg"; arg: ExprNode }
  | { type: "bin"; op: BinOp; left: ExprNode; right: ExprNode }
  | { type: "call"; fn: FnName; args: [ExprNode] };

/** Raised for a tree that breaks the contract or for missing parameter values. */
export class ExprError extends Error {
  constructor(message: string) {
    super(message);
    this.name = "ExprError";
  }
}

const BIN_OPS: ReadonlySet<string> = new Set(["+", "-", "*", "/", "**"]);
const FNS: Readonly<Record<FnName, (v: number) => number>> = {
  exp: Math.exp,
  log: Math.log,
  log10: Math.log10,
  sqrt: Math.sqrt,
  abs: Math.abs,
  sin: Math.sin,
  cos: Math.cos,
  tan: Math.tan,
  arctan: Math.atan,
  tanh: Math.tanh,
};
// The spec's pi and e are the doubles numpy.pi, numpy.e, Math.PI and Math.E (tests check).
const CONSTS: Readonly<Record<ConstName, number>> = spec.constants;
const NODE_KEYS: Readonly<Record<string, readonly string[]>> = {
  num: ["value"],
  name: ["id"],
  const: ["id"],
  neg: ["arg"],
  bin: ["op", "left", "right"],
  call: ["fn", "args"],
};
// Deepest tree accepted, the root counted as 0, as Python's Expr.from_json counts. Far deeper
// than any formula a person writes, and keeps recursion well inside the JS stack.
const MAX_JSON_DEPTH: number = spec.max_json_depth;

// ---------------------------------------------------------------------------------------------
// numpy.power semantics
// ---------------------------------------------------------------------------------------------

/**
 * `numpy.power` on two float64 values, element by element (C99 `pow`).
 *
 * JavaScript's `Math.pow` follows C99 except in two places: C gives pow(1, y) = 1 for every y
 * (NaN included) and pow(-1, ±inf) = 1, where JavaScript gives NaN.
 */
export function npPower(a: number, b: number): number {
  if (a === 1) return 1;
  if (a === -1 && (b === Infinity || b === -Infinity)) return 1;
  return Math.pow(a, b);
}

/**
 * `numpy.power` where the exponent is a scalar (the same for every x).
 *
 * numpy takes fast paths for a scalar exponent of 2 (square), -1 (reciprocal) and 0.5 (sqrt);
 * checked on numpy 2.4: `np.power(np.array([-np.inf, -0.0]), 0.5)` gives `[nan, -0.0]` while
 * C pow gives `[inf, 0.0]`. Square and reciprocal equal a correctly rounded pow, but using them
 * keeps us independent of how closely the engine's `Math.pow` rounds.
 */
export function npPowerScalarExp(a: number, b: number): number {
  if (b === 2) return a * a;
  if (b === 0.5) return Math.sqrt(a);
  if (b === -1) return 1 / a;
  return npPower(a, b);
}

function square(a: number): number {
  return a * a;
}

// ---------------------------------------------------------------------------------------------
// Validation
// ---------------------------------------------------------------------------------------------

function describe(v: unknown): string {
  if (v === null) return "null";
  if (Array.isArray(v)) return "an array";
  if (typeof v === "string") return JSON.stringify(v.length > 40 ? v.slice(0, 40) + "…" : v);
  return typeof v === "object" ? "an object" : `${typeof v} ${String(v)}`;
}

/**
 * Check that `tree` is a well-formed expression tree whose names are all in `argNames`.
 *
 * Returns a fresh copy holding only the contract's fields, so later mutation of the input
 * cannot change a compiled function. Throws ExprError naming the offending node's path.
 */
export function validateTree(tree: unknown, argNames: readonly string[]): ExprNode {
  const allowed = new Set(argNames);
  const walk = (node: unknown, path: string, depth: number): ExprNode => {
    if (depth > MAX_JSON_DEPTH) {
      throw new ExprError(`${path}: tree is nested more than ${MAX_JSON_DEPTH} levels deep.`);
    }
    if (typeof node !== "object" || node === null || Array.isArray(node)) {
      throw new ExprError(`${path}: expected a node object, got ${describe(node)}.`);
    }
    const obj = node as Record<string, unknown>;
    const type = obj["type"];
    if (typeof type !== "string" || !(type in NODE_KEYS)) {
      throw new ExprError(
        `${path}: node type must be one of ${Object.keys(NODE_KEYS).join(", ")}; ` +
          `got ${describe(type)}.`,
      );
    }
    for (const key of Object.keys(obj)) {
      if (key !== "type" && !NODE_KEYS[type]!.includes(key)) {
        throw new ExprError(`${path}: unexpected field ${JSON.stringify(key)} on a ${type} node.`);
      }
    }
    switch (type) {
      case "num": {
        const value = obj["value"];
        if (typeof value !== "number" || Number.isNaN(value)) {
          throw new ExprError(`${path}: num value must be a number, got ${describe(value)}.`);
        }
        return { type: "num", value };
      }
      case "name": {
        const id = obj["id"];
        if (typeof id !== "string" || !allowed.has(id)) {
          const known = argNames.length ? argNames.join(", ") : "(none)";
          throw new ExprError(`${path}: unknown name ${describe(id)}; known names: ${known}.`);
        }
        return { type: "name", id };
      }
      case "const": {
        const id = obj["id"];
        if (typeof id !== "string" || !Object.prototype.hasOwnProperty.call(CONSTS, id)) {
          const known = Object.keys(CONSTS).join(", ");
          throw new ExprError(`${path}: const id must be one of ${known}, got ${describe(id)}.`);
        }
        return { type: "const", id: id as ConstName };
      }
      case "neg":
        return { type: "neg", arg: walk(obj["arg"], `${path}.arg`, depth + 1) };
      case "bin": {
        const op = obj["op"];
        if (typeof op !== "string" || !BIN_OPS.has(op)) {
          throw new ExprError(`${path}: op must be one of + - * / **, got ${describe(op)}.`);
        }
        return {
          type: "bin",
          op: op as BinOp,
          left: walk(obj["left"], `${path}.left`, depth + 1),
          right: walk(obj["right"], `${path}.right`, depth + 1),
        };
      }
      default: {
        // "call"
        const fn = obj["fn"];
        // The spec decides what may be called; FNS only says how (typecheck keeps them equal).
        if (typeof fn !== "string" || !Object.prototype.hasOwnProperty.call(spec.functions, fn)) {
          const known = Object.keys(spec.functions).join(", ");
          throw new ExprError(`${path}: fn must be one of ${known}, got ${describe(fn)}.`);
        }
        const args = obj["args"];
        if (!Array.isArray(args) || args.length !== 1) {
          throw new ExprError(`${path}: ${fn} takes exactly one argument.`);
        }
        return { type: "call", fn: fn as FnName, args: [walk(args[0], `${path}.args[0]`, depth + 1)] };
      }
    }
  };
  return walk(tree, "tree", 0);
}

/** The names (x and parameters) a validated tree refers to. */
export function treeNames(tree: ExprNode): Set<string> {
  const out = new Set<string>();
  const walk = (n: ExprNode): void => {
    switch (n.type) {
      case "name":
        out.add(n.id);
        break;
      case "neg":
        walk(n.arg);
        break;
      case "bin":
        walk(n.left);
        walk(n.right);
        break;
      case "call":
        walk(n.args[0]);
        break;
      default:
        break;
    }
  };
  walk(tree);
  return out;
}

/** Every name a tree refers to, without validating it first (invalid trees throw later). */
function rawNames(tree: unknown): Set<string> {
  const out = new Set<string>();
  const walk = (n: unknown, depth: number): void => {
    if (depth > MAX_JSON_DEPTH || typeof n !== "object" || n === null) return;
    const o = n as Record<string, unknown>;
    if (o["type"] === "name" && typeof o["id"] === "string") out.add(o["id"]);
    for (const k of ["arg", "left", "right"]) walk(o[k], depth + 1);
    if (Array.isArray(o["args"])) for (const a of o["args"]) walk(a, depth + 1);
  };
  walk(tree, 0);
  return out;
}

// ---------------------------------------------------------------------------------------------
// Code generation
// ---------------------------------------------------------------------------------------------

let codegenAllowed: boolean | undefined;

function canCodegen(): boolean {
  if (codegenAllowed === undefined) {
    try {
      codegenAllowed = new Function("return 1")() === 1;
    } catch {
      codegenAllowed = false; // CSP without 'unsafe-eval'
    }
  }
  return codegenAllowed;
}

function numLiteral(v: number): string {
  if (v === Infinity) return "Infinity";
  if (v === -Infinity) return "(-Infinity)";
  if (Object.is(v, -0)) return "(-0)";
  // String(v) is the shortest text that reads back as exactly v.
  return v < 0 ? `(${String(v)})` : String(v);
}

interface Gen {
  code: string;
  varying: boolean; // depends on the loop variable
}

/**
 * Generate JS source for a validated tree. `slot(name)` gives the source for a name;
 * `varyingName` (if any) marks the per-element name; `hoist` receives loop-invariant
 * subexpressions so a curve loop computes them once.
 */
function generate(
  tree: ExprNode,
  slot: (name: string) => string,
  varyingName: string | null,
  hoist: ((code: string) => string) | null,
): string {
  const lift = (g: Gen): string => {
    // A parameter-only compound subexpression feeding an x-dependent one: compute once.
    if (hoist && !g.varying && /[^\w.]/.test(g.code)) return hoist(g.code);
    return g.code;
  };
  const walk = (n: ExprNode): Gen => {
    switch (n.type) {
      case "num":
        return { code: numLiteral(n.value), varying: false };
      case "const":
        return { code: numLiteral(CONSTS[n.id]), varying: false };
      case "name":
        return { code: slot(n.id), varying: n.id === varyingName };
      case "neg": {
        const a = walk(n.arg);
        return { code: `(-${a.code})`, varying: a.varying };
      }
      case "call": {
        const a = walk(n.args[0]);
        return { code: `f_${n.fn}(${a.code})`, varying: a.varying };
      }
      case "bin": {
        const l = walk(n.left);
        const r = walk(n.right);
        const varying = l.varying || r.varying;
        const L = varying ? (l.varying ? l.code : lift(l)) : l.code;
        const R = varying ? (r.varying ? r.code : lift(r)) : r.code;
        if (n.op !== "**") return { code: `(${L} ${n.op} ${R})`, varying };
        if (n.right.type === "num") {
          // Literal exponent: pick numpy's scalar-exponent path at compile time.
          const e = n.right.value;
          if (e === 2) return { code: `sq(${L})`, varying };
          if (e === 0.5) return { code: `f_sqrt(${L})`, varying };
          if (e === -1) return { code: `(1 / ${L})`, varying };
          // A finite exponent other than ±0 never meets JS's two pow differences except base 1.
          return { code: `pw(${L}, ${R})`, varying };
        }
        // numpy sees a scalar exponent unless it depends on x (then it is an array).
        return { code: `${r.varying ? "pw" : "pws"}(${L}, ${R})`, varying };
      }
    }
  };
  const g = walk(tree);
  return hoist && !g.varying ? lift(g) : g.code;
}

const HELPER_NAMES = ["pw", "pws", "sq", ...Object.keys(FNS).map((f) => `f_${f}`)];
const HELPER_VALUES = [npPower, npPowerScalarExp, square, ...Object.values(FNS)];

function buildFunction<T>(body: string): T {
  // The body is built only from validated node kinds, whitelisted helper names, local slot
  // names we generate and numeric literals, so no input text can reach the source.
  const factory = new Function(...HELPER_NAMES, `"use strict";\n${body}`) as (
    ...h: unknown[]
  ) => T;
  return factory(...HELPER_VALUES);
}

// ---------------------------------------------------------------------------------------------
// Closure compilation (fallback and cross-check)
// ---------------------------------------------------------------------------------------------

type Scalar = (args: ArrayLike<number>) => number;

function closureTree(tree: ExprNode, index: Map<string, number>, varyingName: string | null): Scalar {
  const dependsOnVarying = (n: ExprNode): boolean =>
    varyingName !== null && treeNames(n).has(varyingName);
  const walk = (n: ExprNode): Scalar => {
    switch (n.type) {
      case "num": {
        const v = n.value;
        return () => v;
      }
      case "const": {
        const v = CONSTS[n.id];
        return () => v;
      }
      case "name": {
        const i = index.get(n.id)!;
        return (a) => a[i]!;
      }
      case "neg": {
        const f = walk(n.arg);
        return (a) => -f(a);
      }
      case "call": {
        const fn = FNS[n.fn];
        const f = walk(n.args[0]);
        return (a) => fn(f(a));
      }
      case "bin": {
        const l = walk(n.left);
        const r = walk(n.right);
        switch (n.op) {
          case "+":
            return (a) => l(a) + r(a);
          case "-":
            return (a) => l(a) - r(a);
          case "*":
            return (a) => l(a) * r(a);
          case "/":
            return (a) => l(a) / r(a);
          default: {
            const pow = dependsOnVarying(n.right) ? npPower : npPowerScalarExp;
            return (a) => pow(l(a), r(a));
          }
        }
      }
    }
  };
  return walk(tree);
}

// ---------------------------------------------------------------------------------------------
// Public compile API
// ---------------------------------------------------------------------------------------------

export interface CompileOptions {
  /** "auto" (default) generates source when allowed, else closures; tests force either. */
  mode?: "auto" | "codegen" | "closure";
}

function useCodegen(opts?: CompileOptions): boolean {
  const mode = opts?.mode ?? "auto";
  if (mode === "closure") return false;
  if (mode === "codegen") return true;
  return canCodegen();
}

/**
 * Compile a tree into a scalar function of its arguments.
 *
 * `argNames[i]` is read from `args[i]`. Every value is a scalar, so `**` takes numpy's scalar
 * exponent path (as numpy does for 0-d values).
 */
export function compileTree(
  tree: unknown,
  argNames: readonly string[],
  opts?: CompileOptions,
): (args: Float64Array | readonly number[]) => number {
  const checked = validateTree(tree, argNames);
  const index = new Map(argNames.map((n, i) => [n, i] as const));
  if (!useCodegen(opts)) return closureTree(checked, index, null);
  const used = treeNames(checked);
  const locals: string[] = [];
  const slotName = new Map<string, string>();
  for (const name of used) {
    const local = `a${index.get(name)!}`;
    slotName.set(name, local);
    locals.push(`const ${local} = args[${index.get(name)!}];`);
  }
  const code = generate(checked, (n) => slotName.get(n)!, null, null);
  return buildFunction(`return function compiled(args) {\n${locals.join("\n")}\nreturn ${code};\n};`);
}

/** A compiled curve: y[i] = f(params, xs[i]); writes into `out` when given. */
export type CurveFn = (
  params: Float64Array | readonly number[],
  xs: Float64Array | readonly number[],
  out?: Float64Array,
) => Float64Array;

/**
 * Compile a tree of `x` and parameters into a vectorised curve function.
 *
 * `paramNames[i]` is read from `params[i]`; parameter-only subexpressions are computed once
 * per call rather than once per point (the same operations in the same order, so the same
 * doubles).
 */
export function compileCurve(
  tree: unknown,
  paramNames: readonly string[],
  xName = "x",
  opts?: CompileOptions,
): CurveFn {
  if (paramNames.includes(xName)) {
    throw new ExprError(`a parameter may not be named ${JSON.stringify(xName)}.`);
  }
  const names = [...paramNames, xName];
  const checked = validateTree(tree, names);
  const xIndex = names.length - 1;
  const alloc = (n: number, out?: Float64Array): Float64Array => {
    if (out === undefined) return new Float64Array(n);
    if (out.length < n) {
      throw new ExprError(`out has length ${out.length}, needs at least ${n}.`);
    }
    return out;
  };
  if (!useCodegen(opts)) {
    const index = new Map(names.map((n, i) => [n, i] as const));
    const f = closureTree(checked, index, xName);
    return (params, xs, out) => {
      const y = alloc(xs.length, out);
      const args = new Float64Array(names.length);
      for (let j = 0; j < paramNames.length; j++) args[j] = params[j]!;
      for (let i = 0; i < xs.length; i++) {
        args[xIndex] = xs[i]!;
        y[i] = f(args);
      }
      return y;
    };
  }
  const used = treeNames(checked);
  const pre: string[] = [];
  const slotName = new Map<string, string>();
  names.forEach((name, j) => {
    if (!used.has(name)) return;
    if (j === xIndex) {
      slotName.set(name, "xv");
    } else {
      slotName.set(name, `p${j}`);
      pre.push(`const p${j} = params[${j}];`);
    }
  });
  let nHoist = 0;
  const hoisted: string[] = [];
  const code = generate(
    checked,
    (n) => slotName.get(n)!,
    xName,
    (c) => {
      const v = `h${nHoist++}`;
      hoisted.push(`const ${v} = ${c};`);
      return v;
    },
  );
  const body =
    `return function curve(params, xs, out) {\n` +
    `const n = xs.length;\nconst y = alloc(n, out);\n${pre.join("\n")}\n${hoisted.join("\n")}\n` +
    `for (let i = 0; i < n; i++) {\nconst xv = xs[i];\ny[i] = ${code};\n}\nreturn y;\n};`;
  const factory = buildFunction<(alloc: unknown) => CurveFn>(`return function (alloc) {\n${body}\n};`);
  return factory(alloc);
}

// Compiled curves, keyed by the tree object and then by the parameter names in order.
const curveCache = new WeakMap<object, Map<string, { fn: CurveFn; names: string[] }>>();

/**
 * Evaluate a tree of `x` and parameters at every element of `xs`, like the Python side's
 * compiled numpy function. Compiles once per tree object (cached), so calling it every
 * animation frame with new parameter values is cheap.
 */
export function evalCurve(
  tree: unknown,
  params: Readonly<Record<string, number>>,
  xs: Float64Array | readonly number[],
  out?: Float64Array,
): Float64Array {
  if (typeof tree !== "object" || tree === null) {
    throw new ExprError(`tree: expected a node object, got ${describe(tree)}.`);
  }
  const wanted = [...rawNames(tree)].filter((n) => n !== "x").sort();
  const key = wanted.join("\u0000");
  let byNames = curveCache.get(tree);
  if (byNames === undefined) {
    byNames = new Map();
    curveCache.set(tree, byNames);
  }
  let entry = byNames.get(key);
  if (entry === undefined) {
    entry = { fn: compileCurve(tree, wanted), names: wanted };
    byNames.set(key, entry);
  }
  const values = new Float64Array(entry.names.length);
  entry.names.forEach((n, j) => {
    const v = params[n];
    if (typeof v !== "number") {
      throw new ExprError(`parameter ${JSON.stringify(n)} has no value.`);
    }
    values[j] = v;
  });
  return entry.fn(values, xs, out);
}

const scalarCache = new WeakMap<
  object,
  Map<string, (args: Float64Array | readonly number[]) => number>
>();

/** Evaluate a tree of parameters only (no x) at one set of parameter values. */
export function evalScalar(tree: unknown, params: Readonly<Record<string, number>>): number {
  if (typeof tree !== "object" || tree === null) {
    throw new ExprError(`tree: expected a node object, got ${describe(tree)}.`);
  }
  const wanted = [...rawNames(tree)].sort();
  const key = wanted.join("\u0000");
  let byNames = scalarCache.get(tree);
  if (byNames === undefined) {
    byNames = new Map();
    scalarCache.set(tree, byNames);
  }
  let fn = byNames.get(key);
  if (fn === undefined) {
    fn = compileTree(tree, wanted);
    byNames.set(key, fn);
  }
  const args = new Float64Array(wanted.length);
  wanted.forEach((n, j) => {
    const v = params[n];
    if (typeof v !== "number") {
      throw new ExprError(`parameter ${JSON.stringify(n)} has no value.`);
    }
    args[j] = v;
  });
  return fn(args);
}
