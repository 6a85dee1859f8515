// Bundles the widget front end (js/widget.ts and everything it imports, CSS inlined as a string)
// into one minified ESM file, src/curvewright/static/widget.js, which the Python widget loads.
// Usage: node js/build.mjs [--watch] [--dev]   (--dev: no minification)
import * as esbuild from "esbuild";
import { fileURLToPath } from "node:url";
import path from "node:path";

const root = path.resolve(path.dirname(fileURLToPath(import.meta.url)), "..");
const watch = process.argv.includes("--watch");
const dev = process.argv.includes("--dev") || watch;

const options = {
  absWorkingDir: root,
  entryPoints: ["js/widget.ts"],
  outfile: "src/curvewright/static/widget.js",
  bundle: true,
  format: "esm",
  platform: "browser",
  target: ["es2020"],
  minify: !dev,
  sourcemap: dev ? "inline" : "linked",
  // CSS is imported as text and injected by render(), so the bundle is a single file.
  loader: { ".css": "text" },
  legalComments: "none",
  logLevel: "info",
};

if (watch) {
  const ctx = await esbuild.context(options);
  await ctx.watch();
} else {
  await esbuild.build(options);
}
