// Measures the expression evaluator's speed (points per millisecond) on curves of the catalog's
// kind; a measurement to read, never a test. Usage: node js/bench/expr-speed.mjs [points]
import * as esbuild from "esbuild";
import { fileURLToPath } from "node:url";
import path from "node:path";

const here = path.dirname(fileURLToPath(import.meta.url));
const built = await esbuild.build({
  entryPoints: [path.join(here, "..", "expr.ts")],
  bundle: true,
  format: "esm",
  write: false,
  platform: "node",
});
const src = built.outputFiles[0].text;
const { evalCurve } = await import("data:text/javascript;base64," + Buffer.from(src).toString("base64"));

const N = Number(process.argv[2] ?? 100_000);
const n = (value) => ({ type: "num", value });
const v = (id) => ({ type: "name", id });
const b = (op, left, right) => ({ type: "bin", op, left, right });
const c = (fn, a) => ({ type: "call", fn, args: [a] });

const cases = {
  // zero_dose + (full_effect - zero_dose) / (1 + (ec50 / x) ** n_h)
  logistic4: [
    b("+", v("zero_dose"), b("/", b("-", v("full_effect"), v("zero_dose")), b("+", n(1), b("**", b("/", v("ec50"), v("x")), v("n_h"))))),
    { zero_dose: 5, full_effect: 95, ec50: 1e-6, n_h: 1.2 },
  ],
  // vmax * x / (km + x)
  michaelis: [b("/", b("*", v("vmax"), v("x")), b("+", v("km"), v("x"))), { vmax: 6, km: 2 }],
  // baseline + (y0 - baseline) * exp(-k * x)
  decay: [
    b("+", v("baseline"), b("*", b("-", v("y0"), v("baseline")), c("exp", { type: "neg", arg: b("*", v("k"), v("x")) }))),
    { baseline: 10, y0: 100, k: 0.2 },
  ],
};

const xs = Float64Array.from({ length: N }, (_, i) => 1e-9 * Math.pow(10, (6 * i) / N));
const out = new Float64Array(N);
console.log(`node ${process.version}, ${N} points per call`);
for (const [name, [tree, params]] of Object.entries(cases)) {
  for (let i = 0; i < 20; i++) evalCurve(tree, params, xs, out); // warm up (compile + JIT)
  const reps = 200;
  const t0 = performance.now();
  for (let i = 0; i < reps; i++) {
    params[Object.keys(params)[0]] *= 1.0000001; // new values each frame, as during a drag
    evalCurve(tree, params, xs, out);
  }
  const ms = (performance.now() - t0) / reps;
  console.log(`${name.padEnd(10)} ${ms.toFixed(3)} ms per call, ${Math.round(N / ms)} points/ms`);
}
