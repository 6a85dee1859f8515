// Parity of js/expr.ts with the Python evaluator (src/curvewright/expr.py, numpy float64), the
// JS half of the expression contract in DEVELOPERS.md ("The expression tree"):
//
// - every case of tests/data/expr_vectors.json (written by tools/gen_expr_vectors.py from numpy;
//   tests/test_expr.py checks the Python half) is evaluated by both compilers of js/expr.ts,
//   generated source and closures, and by evalCurve, the cached path the widget uses; cases
//   without x also by compileTree and evalScalar, the path of derived quantities;
// - the whitelist and depth limit js/expr.ts enforces are those of src/curvewright/expr_spec.json,
//   the file expr.py reads too (tests/test_expr.py checks the Python side against it), and the
//   vectors exercise every function the spec allows.
import { readFileSync } from "node:fs";
import { describe, expect, it } from "vitest";
import spec from "../../src/curvewright/expr_spec.json";
import {
  type CompileOptions,
  type ExprNode,
  ExprError,
  compileCurve,
  compileTree,
  evalCurve,
  evalScalar,
  validateTree,
} from "../expr";

/** A number as the vector file writes it: non-finite values are strings, -0.0 is kept. */
type Encoded = number | string;

interface VectorCase {
  id: string;
  formula: string;
  tree: unknown;
  names: string[];
  env: Record<string, number>;
  x: Encoded[];
  y: Encoded[];
}

const data = JSON.parse(
  readFileSync(new URL("../../tests/data/expr_vectors.json", import.meta.url), "utf-8"),
) as { about: string; cases: VectorCase[] };

function decode(v: Encoded): number {
  if (typeof v === "number") return v;
  if (v === "NaN") return NaN;
  if (v === "Infinity") return Infinity;
  if (v === "-Infinity") return -Infinity;
  throw new Error(`unexpected value ${JSON.stringify(v)} in the vector file`);
}

// Finite values may differ in the last bits: V8's Math.exp/log/pow/sin/... and numpy's kernels
// (libm or its own SIMD loops, which vary with the CPU) are different implementations, each only
// faithful to about an ulp, and a formula carries such differences on through its arithmetic.
// The bound is the one tests/test_expr.py allows between numpy on two machines for this same
// file (rtol 1e-14, about 45 ulp); on the machine this test was written on the largest
// difference was 2 ulp. NaN, the infinities, zero and every sign bit are compared exactly:
// those are the float semantics the contract fixes (numpy's power paths, division by zero,
// domain errors), and a tolerance must never hide them. The sign of a NaN is not compared,
// because the vector file does not record it.
const RTOL = 1e-14;

const bits = new Float64Array(1);
const bitsAsInt = new BigInt64Array(bits.buffer);

function ulpsApart(a: number, b: number): bigint {
  bits[0] = a;
  const ia = bitsAsInt[0]!;
  bits[0] = b;
  const d = ia - bitsAsInt[0]!;
  return d < 0n ? -d : d;
}

const signBit = (v: number): boolean => v < 0 || Object.is(v, -0);

/** Why `got` is not numpy's `want`, or null when it agrees. */
function mismatch(got: number, want: number): string | null {
  if (Number.isNaN(want) || Number.isNaN(got)) {
    return Number.isNaN(want) && Number.isNaN(got) ? null : "one is NaN, the other is not";
  }
  if (signBit(got) !== signBit(want)) return "the signs differ";
  if (!Number.isFinite(want) || !Number.isFinite(got) || want === 0 || got === 0) {
    // Infinities and zeros (their signs equal, checked above) only match exactly.
    return got === want ? null : "not the same infinity or zero";
  }
  const rel = Math.abs(got - want) / Math.abs(want);
  return rel <= RTOL ? null : `relative difference ${rel} (${ulpsApart(got, want)} ulp)`;
}

type Evaluate = (c: VectorCase, xs: Float64Array) => ArrayLike<number>;

const paramNames = (c: VectorCase): string[] => Object.keys(c.env);
const paramValues = (c: VectorCase): number[] => paramNames(c).map((n) => c.env[n]!);
const curve = (mode: CompileOptions["mode"]): Evaluate => (c, xs) =>
  compileCurve(c.tree, paramNames(c), "x", { mode })(paramValues(c), xs);
const scalar = (mode: CompileOptions["mode"]): Evaluate => (c, xs) => {
  const f = compileTree(c.tree, paramNames(c), { mode });
  return xs.map(() => f(paramValues(c)));
};

// x is an array and every parameter a scalar, as the vectors were made (and as a fit runs).
const CURVE_PATHS: [string, Evaluate][] = [
  ["compileCurve codegen", curve("codegen")],
  ["compileCurve closure", curve("closure")],
  ["evalCurve", (c, xs) => evalCurve(c.tree, c.env, xs)],
];

// Without x every value is a scalar on both sides; the vector repeats that one value per x.
const SCALAR_PATHS: [string, Evaluate][] = [
  ["compileTree codegen", scalar("codegen")],
  ["compileTree closure", scalar("closure")],
  ["evalScalar", (c, xs) => xs.map(() => evalScalar(c.tree, c.env))],
];

describe("tests/data/expr_vectors.json evaluated by js/expr.ts", () => {
  it("holds the cases the Python side writes", () => {
    expect(data.about).toMatch(/^Parity vectors for js\/expr\.ts/);
    expect(data.cases.length).toBeGreaterThanOrEqual(40);
    expect(new Set(data.cases.map((c) => c.id)).size).toBe(data.cases.length);
  });

  it.each(data.cases.map((c) => [c.id, c] as const))("%s", (_id, c) => {
    expect(c.y.length).toBe(c.x.length);
    const xs = Float64Array.from(c.x, decode);
    const want = c.y.map(decode);
    const paths = c.names.includes("x") ? CURVE_PATHS : [...CURVE_PATHS, ...SCALAR_PATHS];
    const failures: string[] = [];
    for (const [label, evaluate] of paths) {
      const got = evaluate(c, xs);
      expect(got.length, label).toBe(want.length);
      want.forEach((w, i) => {
        const why = mismatch(got[i]!, w);
        if (why !== null) {
          failures.push(`${label} at x=${c.x[i]}: got ${got[i]}, numpy ${w}: ${why}`);
        }
      });
    }
    expect(failures, `${c.id}: ${c.formula}`).toEqual([]);
  });

  it("exercises every function and constant of the spec and every node type and operator", () => {
    const seen = {
      type: new Set<string>(),
      fn: new Set<string>(),
      const: new Set<string>(),
      op: new Set<string>(),
    };
    const walk = (n: ExprNode): void => {
      seen.type.add(n.type);
      if (n.type === "call") {
        seen.fn.add(n.fn);
        walk(n.args[0]);
      } else if (n.type === "const") {
        seen.const.add(n.id);
      } else if (n.type === "neg") {
        walk(n.arg);
      } else if (n.type === "bin") {
        seen.op.add(n.op);
        walk(n.left);
        walk(n.right);
      }
    };
    for (const c of data.cases) walk(validateTree(c.tree, [...paramNames(c), "x"]));
    expect([...seen.type].sort()).toEqual(["bin", "call", "const", "name", "neg", "num"]);
    expect([...seen.fn].sort()).toEqual(Object.keys(spec.functions).sort());
    expect([...seen.const].sort()).toEqual(Object.keys(spec.constants).sort());
    expect([...seen.op].sort()).toEqual(["*", "**", "+", "-", "/"]);
  });
});

describe("js/expr.ts enforces src/curvewright/expr_spec.json", () => {
  const x: ExprNode = { type: "name", id: "x" };
  const deep = (depth: number): unknown => {
    let t: unknown = x;
    for (let i = 0; i < depth; i++) t = { type: "neg", arg: t };
    return t;
  };

  it("allows exactly the spec's functions, in the spec's order", () => {
    for (const fn of Object.keys(spec.functions)) {
      const f = compileTree({ type: "call", fn, args: [x] }, ["x"]);
      expect(typeof f([0.5]), fn).toBe("number");
    }
    // The message lists what is allowed, so a function allowed on this side only shows here.
    const known = Object.keys(spec.functions).join(", ");
    expect(() => validateTree({ type: "call", fn: "no_such_fn", args: [x] }, ["x"])).toThrowError(
      new ExprError(`tree: fn must be one of ${known}, got "no_such_fn".`),
    );
  });

  it("has the spec's constants, which are the doubles of pi and e", () => {
    // Math.PI and Math.E are the float64 values nearest pi and e (ECMAScript spec), as are
    // Python's math.pi and math.e, which tests/test_expr.py compares with the same file.
    expect(spec.constants).toEqual({ pi: Math.PI, e: Math.E });
    for (const [id, value] of Object.entries(spec.constants)) {
      expect(evalScalar({ type: "const", id }, {})).toBe(value);
    }
    const known = Object.keys(spec.constants).join(", ");
    expect(() => validateTree({ type: "const", id: "tau" }, [])).toThrowError(
      new ExprError(`tree: const id must be one of ${known}, got "tau".`),
    );
  });

  it("accepts trees up to the spec's max_json_depth, counted from 0 at the root", () => {
    expect(() => validateTree(deep(spec.max_json_depth), ["x"])).not.toThrow();
    expect(() => validateTree(deep(spec.max_json_depth + 1), ["x"])).toThrowError(
      new RegExp(`nested more than ${spec.max_json_depth} levels deep`),
    );
    // The deepest formula Python parses (max_depth levels, so JSON depth max_depth - 1) must
    // reach the browser intact.
    expect(spec.max_json_depth).toBeGreaterThanOrEqual(spec.max_depth);
    const negations = spec.max_depth - 1;
    const y = evalCurve(deep(negations) as ExprNode, {}, Float64Array.of(2));
    expect(y[0]).toBe(negations % 2 === 0 ? 2 : -2);
  });
});
