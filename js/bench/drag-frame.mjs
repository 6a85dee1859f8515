// Measures, in Node, the JavaScript work of one drag-to-redraw frame and of one pan/zoom frame
// for 1k and 100k data points; a measurement to read, never a test.
// Usage: node js/bench/drag-frame.mjs [frames]
//
// A drag frame is what widget.ts runs per animation frame while a handle moves: solve for the
// moved parameters (interact.solveDrag), sample the curve at two points per pixel across the
// view (curve.sampleAxis + expr.evalCurve), map through the d3 scales and build the SVG path
// (curve.pathFromPixels), and place the handles. Points are not redrawn during a drag, so the
// number of data points should not matter; the run with 100k points shows whether it does.
// A pan/zoom frame redraws the points: map every point through the scales and thin them to one
// per 2-pixel cell (decimate.decimateCells), as plot.ts does above 4000 points.
// Not measured here: the browser's own layout, SVG and canvas painting (the in-browser figure
// comes from benchmarks/, driving the real page).
import * as esbuild from "esbuild";
import { fileURLToPath } from "node:url";
import path from "node:path";

const here = path.dirname(fileURLToPath(import.meta.url));
const js = path.join(here, "..");
const entry = `
export { evalCurve } from "./expr";
export { sampleAxis, pathFromPixels } from "./curve";
export { decimateCells } from "./decimate";
export { solveDrag, solveOptions, handleViews, placePins, pinViews } from "./interact";
export { scaleLinear, scaleLog } from "d3-scale";
`;
const built = await esbuild.build({
  stdin: { contents: entry, resolveDir: js, loader: "ts" },
  bundle: true,
  format: "esm",
  write: false,
  platform: "node",
});
const lib = await import("data:text/javascript;base64," + Buffer.from(built.outputFiles[0].text).toString("base64"));
const { evalCurve, sampleAxis, pathFromPixels, decimateCells, solveDrag, solveOptions, handleViews, scaleLinear, scaleLog } = lib;

const FRAMES = Number(process.argv[2] ?? 300);
const PLOT_W = 600; // plot area of a 680 px wide widget
const PLOT_H = 302;

// The catalog's inhibition 4PL as the Python side sends it (tree of the formula
// full_effect + (zero_dose - full_effect)/(1 + (x/10**log_ic50)**n_h)).
const n = (value) => ({ type: "num", value });
const v = (id) => ({ type: "name", id });
const b = (op, left, right) => ({ type: "bin", op, left, right });
const ic50 = b("**", n(10), v("log_ic50"));
const tree = b("+", v("full_effect"), b("/", b("-", v("zero_dose"), v("full_effect")), b("+", n(1), b("**", b("/", v("x"), ic50), v("n_h")))));
const p = (name, value, extra = {}) => ({ name, value, lower: null, upper: null, log_scale: false, positive: false, unit: "", description: "", ...extra });
const model = {
  name: "inhibition_4pl",
  formula: null,
  tree,
  domain: "x>=0",
  has_preview: true,
  params: [p("full_effect", 5), p("zero_dose", 95), p("log_ic50", -6.7), p("n_h", 1.1, { lower: 0, log_scale: true, positive: true })],
  handles: [
    { name: "midpoint", label: "IC50", x: ic50, y: b("/", b("+", v("zero_dose"), v("full_effect")), n(2)), moves: ["log_ic50"] },
    { name: "zero_dose", label: "zero-dose level", x: b("**", n(10), b("-", v("log_ic50"), b("/", n(1.5), v("n_h")))), y: v("zero_dose"), moves: ["zero_dose"] },
    { name: "full_effect", label: "full-effect level", x: b("**", n(10), b("+", v("log_ic50"), b("/", n(1.5), v("n_h")))), y: v("full_effect"), moves: ["full_effect"] },
    { name: "steepness", label: "Hill coefficient", x: b("*", ic50, b("**", n(3), b("/", n(1), v("n_h")))), y: b("+", v("full_effect"), b("/", b("-", v("zero_dose"), v("full_effect")), n(4))), moves: ["n_h"] },
  ],
};
const settings = Object.fromEntries(model.params.map((q) => [q.name, { value: q.value, lower: q.lower, upper: q.upper, fixed: false }]));

function makeData(N) {
  const xs = new Float64Array(N);
  const ys = new Float64Array(N);
  let seed = 12345;
  const rand = () => ((seed = (seed * 1103515245 + 12345) % 2147483648) / 2147483648);
  for (let i = 0; i < N; i++) {
    const x = 10 ** (-9 + 5 * rand());
    xs[i] = x;
    ys[i] = 5 + 90 / (1 + (x / 2e-7) ** 1.1) + (rand() - 0.5) * 10;
  }
  return { xs, ys };
}

function stats(times) {
  const s = [...times].sort((a, c) => a - c);
  const q = (f) => s[Math.min(s.length - 1, Math.floor(f * s.length))];
  return `median ${q(0.5).toFixed(3)} ms, p95 ${q(0.95).toFixed(3)} ms, max ${s[s.length - 1].toFixed(3)} ms`;
}

console.log(`node ${process.version}; ${FRAMES} frames each; plot ${PLOT_W}x${PLOT_H} px; JS work only (no painting)`);
for (const N of [1_000, 100_000]) {
  const { xs, ys } = makeData(N);
  const x = scaleLog().domain([1e-9 / 2, 1e-4 * 2]).range([0, PLOT_W]);
  const y = scaleLinear().domain([-5, 105]).range([PLOT_H, 0]);
  const opts = solveOptions(model, settings, true, false, { x: 5.6, y: 110 });

  // ---- drag frames: the midpoint moves across three decades and back
  let values = Object.fromEntries(model.params.map((q) => [q.name, q.value]));
  const sx = new Float64Array(PLOT_W * 2);
  const px = new Float64Array(PLOT_W * 2);
  const py = new Float64Array(PLOT_W * 2);
  const ycurve = new Float64Array(PLOT_W * 2);
  const dragTimes = [];
  let pathLength = 0;
  for (let f = 0; f < FRAMES + 20; f++) {
    const t0 = performance.now();
    const phase = (f % 120) / 120;
    const target = { x: 10 ** (-8 + 3 * Math.abs(2 * phase - 1)), y: 50 };
    const res = solveDrag(model, "midpoint", values, target, [], opts);
    values = res.params;
    const [d0, d1] = x.domain();
    sampleAxis(d0, d1, true, sx.length, sx);
    evalCurve(tree, values, sx, ycurve);
    for (let i = 0; i < sx.length; i++) {
      px[i] = x(sx[i]);
      py[i] = y(ycurve[i]);
    }
    pathLength += pathFromPixels(px, py).length;
    handleViews(model, values, new Set());
    const t1 = performance.now();
    if (f >= 20) dragTimes.push(t1 - t0); // the first frames compile and warm the JIT
  }

  // ---- pan/zoom frames: every point mapped, thinned to one per 2-pixel cell
  const panTimes = [];
  let kept = 0;
  for (let f = 0; f < Math.min(FRAMES, 120) + 10; f++) {
    const shift = 1 + 0.002 * (f % 50);
    const xz = scaleLog().domain([1e-9 / 2 * shift, 1e-4 * 2 * shift]).range([0, PLOT_W]);
    const t0 = performance.now();
    const keep = decimateCells(xs, ys, PLOT_W, PLOT_H, (val) => xz(val), (val) => y(val), 2);
    for (let k = 0; k < keep.length; k++) {
      const i = keep[k];
      px[k % px.length] = xz(xs[i]);
      py[k % py.length] = y(ys[i]);
    }
    const t1 = performance.now();
    kept = keep.length;
    if (f >= 10) panTimes.push(t1 - t0);
  }
  console.log(`${N.toLocaleString("en")} points:`);
  console.log(`  drag frame (solve + ${sx.length} curve samples + path + handles): ${stats(dragTimes)}`);
  console.log(`  pan/zoom frame (map + thin points; ${kept} drawn):            ${stats(panTimes)}`);
  if (pathLength === 0) console.log("  (no path was built: check the benchmark)");
}
