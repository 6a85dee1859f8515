// Unit tests of the expression evaluator: validation, numpy's float semantics, and agreement
// between the generated-source and closure compilers. Parity with the Python side is in
// expr-parity.test.ts: every case of tests/data/expr_vectors.json (numpy's values, checked on the
// Python side by tests/test_expr.py), and the whitelist and depth limit of the spec both sides
// read, src/curvewright/expr_spec.json.
import { describe, expect, it } from "vitest";
import {
  type ExprNode,
  ExprError,
  compileCurve,
  compileTree,
  evalCurve,
  evalScalar,
  npPower,
  validateTree,
} from "../expr";

const num = (value: number): ExprNode => ({ type: "num", value });
const name = (id: string): ExprNode => ({ type: "name", id });
const bin = (op: "+" | "-" | "*" | "/" | "**", left: ExprNode, right: ExprNode): ExprNode => ({
  type: "bin",
  op,
  left,
  right,
});
const call = (fn: string, arg: ExprNode): ExprNode =>
  ({ type: "call", fn, args: [arg] }) as ExprNode;

/** Same double, treating NaN as equal to NaN and keeping the sign of zero out of it. */
function sameDouble(a: number, b: number): boolean {
  return (Number.isNaN(a) && Number.isNaN(b)) || a === b;
}

describe("validateTree", () => {
  const bad: [string, unknown, RegExp][] = [
    ["non-object", 3, /expected a node object, got number 3/],
    ["array", [], /expected a node object, got an array/],
    ["unknown type", { type: "call2" }, /node type must be one of .*got "call2"/],
    ["bad op", { type: "bin", op: "%", left: num(1), right: num(2) }, /op must be one of/],
    ["unknown fn", { type: "call", fn: "eval", args: [num(1)] }, /fn must be one of .*got "eval"/],
    ["arity", { type: "call", fn: "exp", args: [num(1), num(2)] }, /exp takes exactly one argument/],
    ["args not array", { type: "call", fn: "exp", args: num(1) }, /exp takes exactly one/],
    ["unknown name", name("k"), /unknown name "k"; known names: x/],
    ["const id", { type: "const", id: "tau" }, /const id must be one of pi, e, got "tau"/],
    ["NaN literal", num(NaN), /num value must be a number/],
    ["string literal", { type: "num", value: "1" }, /num value must be a number, got "1"/],
    ["extra field", { type: "num", value: 1, code: "x" }, /unexpected field "code"/],
    ["nested path", bin("+", num(1), { type: "neg" } as unknown as ExprNode), /tree\.right\.arg: expected a node object/],
  ];
  for (const [label, tree, msg] of bad) {
    it(`rejects ${label}`, () => {
      expect(() => validateTree(tree, ["x"])).toThrowError(ExprError);
      expect(() => validateTree(tree, ["x"])).toThrowError(msg);
    });
  }

  it("rejects a tree nested too deeply", () => {
    let t: ExprNode = name("x");
    for (let i = 0; i < 1000; i++) t = { type: "neg", arg: t };
    expect(() => validateTree(t, ["x"])).toThrowError(/nested more than 400 levels/);
  });

  it("copies the tree so later edits of the input change nothing", () => {
    const t = { type: "bin", op: "+", left: num(1), right: name("x") };
    const f = compileTree(t, ["x"]);
    (t.left as { value: number }).value = 100;
    expect(f([2])).toBe(3);
  });

  it("never pastes a name into generated source", () => {
    // A hostile identifier is only ever a lookup key; with it declared, it evaluates as a slot.
    const evil = '"); globalThis.__pwned = 1; ("';
    const f = compileTree(bin("*", name(evil), num(2)), [evil]);
    expect(f([21])).toBe(42);
    expect((globalThis as Record<string, unknown>)["__pwned"]).toBeUndefined();
  });
});

describe("numpy float semantics", () => {
  // Expected values printed by numpy 2.4.6 (np.power on float64 arrays with an array exponent,
  // i.e. C99 pow) in this repository's .venv; the reference library, not our own code.
  const powCases: [number, number, number][] = [
    [1, NaN, 1],
    [-1, Infinity, 1],
    [-1, -Infinity, 1],
    [NaN, 0, 1],
    [-8, 1 / 3, NaN],
    [-Infinity, 0.5, Infinity],
    [-0, 0.5, 0],
    [Infinity, 0.5, Infinity],
    [0, -1, Infinity],
    [-0, -1, -Infinity],
    [-0, -3, -Infinity],
    [2, NaN, NaN],
  ];
  it.each(powCases)("power(%d, %d) = %d with an x-dependent exponent", (a, b, want) => {
    expect(sameDouble(npPower(a, b), want)).toBe(true);
    // The exponent is an array in numpy when it depends on x: x ** b written as (x*0 + b).
    const tree = bin("**", name("a"), bin("+", bin("*", name("x"), num(0)), name("b")));
    const y = evalCurve(tree, { a, b }, Float64Array.of(1));
    expect(sameDouble(y[0]!, want)).toBe(true);
  });

  // numpy 2.4.6: np.power(np.array([-np.inf, -0.0]), 0.5) -> [nan, -0.0] (its sqrt fast path for
  // a scalar exponent), while an array exponent gives [inf, 0.0] as above.
  it("uses numpy's sqrt path for a scalar exponent of 0.5", () => {
    const xs = Float64Array.of(-Infinity, -0, 4);
    const literal = evalCurve(bin("**", name("x"), num(0.5)), {}, xs);
    const param = evalCurve(bin("**", name("x"), name("n")), { n: 0.5 }, xs);
    for (const y of [literal, param]) {
      expect(Number.isNaN(y[0]!)).toBe(true);
      expect(Object.is(y[1], -0)).toBe(true);
      expect(y[2]).toBe(2);
    }
  });

  it("gives NaN, ±inf where numpy does (common practice: IEEE 754 / C99 Annex F)", () => {
    const xs = Float64Array.of(-1, 0, -8);
    expect([...evalCurve(call("log", name("x")), {}, xs)].slice(0, 2)).toEqual([NaN, -Infinity]);
    expect(Number.isNaN(evalCurve(call("sqrt", name("x")), {}, xs)[0]!)).toBe(true);
    expect([...evalCurve(bin("/", num(1), name("x")), {}, xs)]).toEqual([-1, Infinity, -0.125]);
    expect(evalCurve(bin("/", num(0), name("x")), {}, Float64Array.of(0))[0]).toBeNaN();
    const cube = evalCurve(bin("**", name("x"), bin("/", num(1), num(3))), {}, xs);
    expect(cube[2]).toBeNaN(); // (-8) ** (1/3) is NaN in numpy (no real cube root)
  });

  it("maps the named functions to their numpy meanings", () => {
    const x = 0.7;
    const expected: Record<string, number> = {
      exp: Math.exp(x),
      log: Math.log(x),
      log10: Math.log10(x),
      sqrt: Math.sqrt(x),
      abs: x,
      sin: Math.sin(x),
      cos: Math.cos(x),
      tan: Math.tan(x),
      arctan: Math.atan(x),
      tanh: Math.tanh(x),
    };
    for (const [fn, want] of Object.entries(expected)) {
      expect(compileTree(call(fn, name("x")), ["x"])([x])).toBe(want);
    }
    // log10(1000) is exactly 3 in numpy (common practice: correctly rounded at powers of ten).
    expect(evalScalar(call("log10", num(1000)), {})).toBe(3);
    expect(evalScalar({ type: "const", id: "pi" }, {})).toBe(Math.PI);
    expect(evalScalar({ type: "const", id: "e" }, {})).toBe(Math.E);
  });
});

// A small deterministic generator of random trees over x and two parameters.
function mulberry32(seed: number): () => number {
  let a = seed >>> 0;
  return () => {
    a = (a + 0x6d2b79f5) >>> 0;
    let t = a;
    t = Math.imul(t ^ (t >>> 15), t | 1);
    t ^= t + Math.imul(t ^ (t >>> 7), t | 61);
    return ((t ^ (t >>> 14)) >>> 0) / 4294967296;
  };
}

function randomTree(rand: () => number, depth: number): ExprNode {
  const leaf = depth <= 0 || rand() < 0.25;
  if (leaf) {
    const r = rand();
    if (r < 0.35) return name("x");
    if (r < 0.55) return name("a");
    if (r < 0.7) return name("b");
    if (r < 0.75) return { type: "const", id: rand() < 0.5 ? "pi" : "e" };
    const specials = [0.5, 2, -1, 0, 1, -0.5, 3];
    return num(rand() < 0.3 ? specials[Math.floor(rand() * specials.length)]! : (rand() - 0.5) * 8);
  }
  const r = rand();
  if (r < 0.1) return { type: "neg", arg: randomTree(rand, depth - 1) };
  if (r < 0.35) {
    const fns = ["exp", "log", "log10", "sqrt", "abs", "sin", "cos", "tan", "arctan", "tanh"];
    return call(fns[Math.floor(rand() * fns.length)]!, randomTree(rand, depth - 1));
  }
  const ops = ["+", "-", "*", "/", "**"] as const;
  return bin(ops[Math.floor(rand() * ops.length)]!, randomTree(rand, depth - 1), randomTree(rand, depth - 1));
}

describe("compilers agree", () => {
  it("generated source, closures and per-point scalar evaluation give the same doubles", () => {
    const rand = mulberry32(20240611);
    const xs = Float64Array.from({ length: 25 }, (_, i) => (i - 8) * 0.37);
    xs[3] = 0;
    xs[4] = -0;
    for (let t = 0; t < 400; t++) {
      const tree = randomTree(rand, 5);
      const a = (rand() - 0.3) * 5;
      const b = rand() < 0.2 ? 0.5 : (rand() - 0.5) * 3;
      const gen = compileCurve(tree, ["a", "b"], "x", { mode: "codegen" })([a, b], xs);
      const clo = compileCurve(tree, ["a", "b"], "x", { mode: "closure" })([a, b], xs);
      const viaCache = evalCurve(tree, { a, b }, xs);
      for (let i = 0; i < xs.length; i++) {
        const ok = sameDouble(gen[i]!, clo[i]!) && sameDouble(gen[i]!, viaCache[i]!);
        if (!ok) throw new Error(`tree ${JSON.stringify(tree)} at x=${xs[i]}: ${gen[i]} vs ${clo[i]}`);
      }
    }
  });

  it("a parameter-only tree agrees between compileTree modes", () => {
    const rand = mulberry32(7);
    for (let t = 0; t < 200; t++) {
      const tree = randomTree(rand, 4);
      const args = [rand() * 3, rand() - 0.5, rand() * 10 - 5];
      const g = compileTree(tree, ["a", "b", "x"], { mode: "codegen" })(args);
      const c = compileTree(tree, ["a", "b", "x"], { mode: "closure" })(args);
      expect(sameDouble(g, c)).toBe(true);
    }
  });

  it("evalCurve follows new parameter values and writes into a given buffer", () => {
    const tree = bin("+", name("a"), bin("*", name("b"), name("x")));
    const xs = Float64Array.of(0, 1, 2);
    expect([...evalCurve(tree, { a: 1, b: 2 }, xs)]).toEqual([1, 3, 5]);
    const out = new Float64Array(3);
    const r = evalCurve(tree, { a: -1, b: 0.5 }, xs, out);
    expect(r).toBe(out);
    expect([...out]).toEqual([-1, -0.5, 0]);
  });

  it("names a missing parameter", () => {
    const tree = bin("*", name("k"), name("x"));
    expect(() => evalCurve(tree, {}, Float64Array.of(1))).toThrowError(/parameter "k" has no value/);
    expect(() => compileCurve(tree, ["x"])).toThrowError(/may not be named "x"/);
  });
});
