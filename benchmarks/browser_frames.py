"""In-browser speed of the widget: drag-to-redraw frame time, and a callable model's kernel preview.

Run with ``.venv/bin/python benchmarks/browser_frames.py`` (needs Debian's chromium and the built
bundle, as ``make test-browser`` does). Prints the figures for README; nothing is asserted.

What is measured, in JupyterLab 4 with Debian's chromium (headless, software rendering):

* Drag-to-redraw, formula model (``stimulation_4pl``), 1k and 100k points. The midpoint handle is
  dragged with the real (CDP) mouse, back and forth, while a requestAnimationFrame loop in the
  page records, for every frame: the interval since the previous frame, and the main-thread
  frame time -- from the frame's start (the rAF timestamp) until a message posted from the rAF
  callback is delivered, which happens after that frame's input handling, rAF callbacks
  (the widget's solve and redraw), style, layout and paint recording. A MutationObserver on the
  curve's path also gives input-to-redraw latency: from a pointermove event's timeStamp to the
  next change of the path's ``d``; and the page's rAF callbacks are timed (the widget's solve
  and redraw JavaScript alone). Budget: 16.7 ms per frame at 60 Hz. The same is measured for a
  pan of the view, which redraws the points as well as the curve (the page gets a thinned view
  of 20k points when there are 100k; the fit uses all of them).
* Kernel round trip for a Python-callable model's preview: (a) the preview message sent through
  the widget's model until ``preview_curve`` comes back; (b) what a person sees: typing a value
  into the panel until the curve's path changes (the page throttles requests to one per 120 ms;
  trips here are spaced wider so the throttle adds nothing). Run on a stock server and on one
  with Nagle's algorithm off on the kernel websocket (see ../shared/browser-testing.md): the
  difference is the server's transport, not the widget.
* Review of a batch at 384 groups (a 384-well plate, ``batch.review()``): the overview's draw
  (every small plot on its one canvas) timed in the page, called directly; a filter click until
  the overview and table are redrawn (a kernel round trip: the page asks ``review_filter``) and
  the next frame; opening a group from the table until the main plot shows it; and the
  main-thread frame time while the overview is scrolled (``--review-only`` runs just these).
"""

from __future__ import annotations

import argparse
import itertools
import json
import math
import os
import platform
import statistics
import sys
import tempfile
import time
from pathlib import Path
from typing import Any

REPO = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(REPO / "tests" / "browser"))

import cwpage  # noqa: E402  (the browser tests' page helpers, reused)
import harness  # noqa: E402

FORMULA_CELL = """
import numpy as np, pandas as pd, curvewright as cw
rng = np.random.default_rng(7)
n = {n}
conc = 10 ** rng.uniform(-9, -3.5, n)
resp = 96 + (4 - 96) / (1 + (conc / 10 ** -6.3) ** 1.1) + rng.normal(0, 3, n)
w = cw.CurveBench(pd.DataFrame({{"conc": conc, "response": resp}}), x="conc", y="response",
                  model="stimulation_4pl")
w
"""

CALLABLE_CELL = """
import numpy as np, curvewright as cw
def rate(x, Vmax, Km):
    return Vmax * x / (Km + x)
rng = np.random.default_rng(7)
s = np.repeat(np.array([0.5, 1, 2, 4, 8, 16, 32, 64]), 3)
v = rate(s, 12.0, 5.0) + rng.normal(0, 0.3, s.size)
w = cw.CurveBench(s, v, model=rate)
w
"""

REVIEW_CELL = """
import numpy as np, pandas as pd, curvewright as cw
rng = np.random.default_rng(11)
conc = np.repeat(np.logspace(-9, -4, 8), 3)
rows = []
for r in "ABCDEFGHIJKLMNOP":
    for c in range(1, 25):
        well = f"{r}{c}"
        y = 5 + 95 / (1 + (conc / 10 ** rng.uniform(-7.5, -5.5)) ** rng.uniform(0.8, 1.6))
        y = y + rng.normal(0, 3, conc.size)
        if rng.random() < 0.03:
            y[:] = 50.0  # a few broken wells: a constant reading
        rows += [(well, x, v) for x, v in zip(conc, y)]
df = pd.DataFrame(rows, columns=["well", "conc", "resp"])
batch = cw.fit_groups("inhibition_4pl", data=df, x="conc", y="resp", by="well", progress=False)
w = cw.CurveBench(batch)  # what batch.review() opens
w
"""

REVIEW_DRAW_JS = """(root, n) => {
  const p = root._cwReview, out = [];
  for (let i = 0; i < n; i++) { p.drawOverview(); out.push(p.lastDrawMs); }
  return out;
}"""

# A filter button clicked until the panel shows that filter (Python answered and the panel
# redrew), then the next frame (painted); each round trip's time.
REVIEW_FILTER_JS = """async (root, n) => {
  const sec = root.querySelector('.cw-review'), out = [];
  const order = ['failed', 'all', 'flagged', 'all'];
  for (let i = 0; i < n; i++) {
    const f = order[i % order.length];
    const t0 = performance.now();
    await new Promise((res) => {
      const mo = new MutationObserver(() => {
        if (sec.dataset.cwReviewFilter === f) { mo.disconnect(); res(); } });
      mo.observe(sec, { attributes: true });
      sec.querySelector(`button[data-filter="${f}"]`).click();
    });
    await new Promise((res) => requestAnimationFrame(() => res()));
    out.push(performance.now() - t0);
  }
  return out;
}"""

# A table row clicked until the main plot's model root says that group is open, then a frame.
REVIEW_OPEN_JS = """async (root, n) => {
  const out = [];
  const rows = [...root.querySelectorAll('.cw-review tr[data-group]')];
  for (let i = 0; i < n; i++) {
    const tr = rows[(i * 37 + 5) % rows.length];
    const g = tr.dataset.group;
    if (root.dataset.cwReviewOpen === g) continue;
    const t0 = performance.now();
    await new Promise((res) => {
      const mo = new MutationObserver(() => {
        if (root.dataset.cwReviewOpen === g) { mo.disconnect(); res(); } });
      mo.observe(root, { attributes: true });
      root.querySelector(`.cw-review tr[data-group="${g}"]`).click();
    });
    await new Promise((res) => requestAnimationFrame(() => res()));
    out.push(performance.now() - t0);
  }
  return out;
}"""

RECORDER_JS = """(root) => {
  const rec = { frames: [], work: [], moves: [], paths: [], on: true };
  const raf = window.requestAnimationFrame;
  const loop = (ts) => {
    if (!rec.on) return;
    rec.frames.push(ts);
    const ch = new MessageChannel();
    ch.port1.onmessage = () => rec.work.push([ts, performance.now() - ts]);
    ch.port2.postMessage(null);
    raf.call(window, loop);
  };
  raf.call(window, loop);
  // Time the page's other rAF callbacks (the widget's solve and redraw) frame by frame: their
  // JavaScript alone, without style, layout and paint. Our own loop keeps the original.
  rec.js = [];
  window.requestAnimationFrame = (cb) => raf.call(window, (ts) => {
    const t0 = performance.now();
    try { cb(ts); } finally { rec.js.push([ts, performance.now() - t0]); }
  });
  rec.restore = () => { window.requestAnimationFrame = raf; };
  const onMove = (e) => { if (e.buttons) rec.moves.push(e.timeStamp); };
  root.addEventListener('pointermove', onMove, { capture: true });
  // Only real changes count: setting d to the same string also makes a mutation record.
  const path = root.querySelector('path.cw-curve');
  let last = path.getAttribute('d');
  const mo = new MutationObserver(() => {
    const d = path.getAttribute('d');
    if (d !== last) { last = d; rec.paths.push(performance.now()); }
  });
  mo.observe(path, { attributes: true, attributeFilter: ['d'] });
  root._cwBench = { rec, stop: () => {
    rec.on = false; mo.disconnect(); rec.restore();
    root.removeEventListener('pointermove', onMove, { capture: true });
  } };
}"""

STOP_JS = """(root) => { root._cwBench.stop(); const r = root._cwBench.rec;
  return { frames: r.frames, work: r.work, moves: r.moves, paths: r.paths, js: r.js }; }"""

PREVIEW_TRIPS_JS = """async (root, [n, gap]) => {
  const m = root._cwModel, times = [];
  const [x0, x1] = [0.5, 64];
  for (let i = 0; i < n; i++) {
    if (gap > 0) await new Promise((res) => setTimeout(res, gap));
    const values = { Vmax: 10 + (i % 7), Km: 4 + (i % 3) };
    const t0 = performance.now();
    await new Promise((res) => {
      const h = () => { const c = m.get('preview_curve');
        if (c && c.values && c.values.Vmax === values.Vmax && c.values.Km === values.Km) {
          m.off('change:preview_curve', h); res(); } };
      m.on('change:preview_curve', h);
      m.send({ type: 'preview', values, x_min: x0, x_max: x1 });
    });
    times.push(performance.now() - t0);
  }
  return times;
}"""

TYPED_JS = """(root) => {
  const rec = { inputs: [], paths: [], sent: [], arrived: [] };
  root.addEventListener('input', (e) => rec.inputs.push(e.timeStamp), { capture: true });
  // Timestamps of the preview request leaving and of its answer arriving, for the breakdown.
  const m = root._cwModel;
  const send = m.send.bind(m);
  m.send = (msg, ...rest) => {
    if (msg && msg.type === 'preview') rec.sent.push(performance.now());
    return send(msg, ...rest);
  };
  m.on('change:preview_curve', () => rec.arrived.push(performance.now()));
  const path = root.querySelector('path.cw-curve');
  let last = path.getAttribute('d');
  const mo = new MutationObserver(() => {
    const d = path.getAttribute('d');
    if (d !== last) { last = d; rec.paths.push(performance.now()); }
  });
  mo.observe(path, { attributes: true, attributeFilter: ['d'] });
  root._cwTyped = rec;
}"""


def pct(values: list[float], q: float) -> float:
    """The q-quantile (0..1) by linear interpolation."""
    if not values:
        return float("nan")
    s = sorted(values)
    k = (len(s) - 1) * q
    lo = int(k)
    hi = min(lo + 1, len(s) - 1)
    return s[lo] + (s[hi] - s[lo]) * (k - lo)


def summary(values: list[float]) -> str:
    return (
        f"median {statistics.median(values):6.1f}  p95 {pct(values, 0.95):6.1f}  "
        f"max {max(values):6.1f} ms  (n={len(values)})"
    )


def with_bundle(cell: str, bundle: Path | None) -> str:
    """Make the cell's widget load ``bundle`` instead of the package's (to compare builds)."""
    if bundle is None:
        return cell
    sub = f"class _Bench(cw.CurveBench):\n    _esm = __import__('pathlib').Path({str(bundle)!r})\n"
    return cell.replace("w = cw.CurveBench(", sub + "w = _Bench(")


def open_widget(
    page: Any, server: harness.Server, name: str, cell: str, *, handles: bool = True
) -> Any:
    harness.write_notebook(server.root / name, [cell])
    harness.open_notebook(page, server, name)
    harness.run_cell(page, 0, timeout=180_000)
    return cwpage.wait_rendered(page, timeout=180_000, handles=handles)


def drag_frames(
    page: Any,
    root: Any,
    moves: int,
    amplitude: float,
    *,
    pan: bool = False,
    handle_css: str | None = None,
) -> dict[str, list[float]]:
    """Drag the midpoint handle back and forth while recording frames; or, with ``pan``, the
    empty top-left of the plot (which pans the view and redraws the points too); or, with
    ``handle_css``, that handle up and down (a callable model's pin)."""
    vertical = handle_css is not None
    if handle_css is not None:
        handle = root.locator(handle_css).first
        handle.scroll_into_view_if_needed()
        x, y = cwpage.centre(handle)
    elif pan:
        cwpage.show_plot(root)
        box = root.locator(".cw-surface").first.bounding_box()
        x, y = box["x"] + 20, box["y"] + 20
    else:
        handle = cwpage.handle_named(root, "EC50")
        handle.scroll_into_view_if_needed()
        x, y = cwpage.centre(handle)
    root.evaluate(RECORDER_JS)
    page.mouse.move(x, y)
    page.mouse.down()
    # Each call sends `steps` CDP moves back to back: faster than one call per move, so the
    # page gets input in (nearly) every frame, as with a real mouse.
    steps = 4
    for i in range(1, moves // steps + 1):
        off = amplitude * math.sin(2 * math.pi * i * steps / 160)
        tx, ty = (x, y - off) if vertical else (x + off, y)
        page.mouse.move(tx, ty, steps=steps)
    page.mouse.up()
    page.wait_for_timeout(200)  # let the last frames land (a benchmark may wait by the clock)
    rec = root.evaluate(STOP_JS)
    moves_t: list[float] = rec["moves"]
    t_first, t_last = moves_t[0], moves_t[-1]
    frames = [t for t in rec["frames"] if t_first <= t <= t_last + 50]
    intervals = [b - a for a, b in itertools.pairwise(frames)]
    # Main-thread time of the frames in which the curve was redrawn (a path change between
    # the frame's start and the end of its work), and of all frames of the drag.
    paths = rec["paths"]
    work_all = [(t, w) for t, w in rec["work"] if t_first <= t <= t_last + 50]
    work = [w for t, w in work_all if any(t <= p <= t + w for p in paths)]
    js_by_frame: dict[float, float] = {}
    for t, w in rec["js"]:
        if t_first <= t <= t_last + 50:
            js_by_frame[t] = js_by_frame.get(t, 0.0) + w
    # Input-to-redraw: each path change answers the oldest move not yet answered.
    latency = []
    j = 0
    for p in rec["paths"]:
        if j >= len(moves_t) or moves_t[j] > p:
            continue
        latency.append(p - moves_t[j])
        while j < len(moves_t) and moves_t[j] <= p:
            j += 1
    duration = (t_last - t_first) / 1000
    return {
        "interval": intervals,
        "work_redraw": work,
        "work_all": [w for _, w in work_all],
        "widget_js": list(js_by_frame.values()),
        "latency": latency,
        "moves_per_s": [len(moves_t) / duration if duration > 0 else float("nan")],
        "redraws_per_s": [len(latency) / duration if duration > 0 else float("nan")],
    }


def idle_frames(page: Any, root: Any, ms: int = 1500) -> list[float]:
    """Main-thread frame time with nothing happening: the floor the drag figures sit on
    (headless chromium's frame scheduling and the recorder's own message hop)."""
    root.evaluate(RECORDER_JS)
    page.wait_for_timeout(ms)
    rec = root.evaluate(STOP_JS)
    return [w for _, w in rec["work"]]


def typed_round_trips(page: Any, root: Any, n: int) -> dict[str, list[float]]:
    """Type a new Vmax into the panel n times; time from the input event to the redrawn curve,
    split into: input -> request sent, sent -> answer arrived (the kernel round trip), and
    answer -> curve redrawn."""
    root.evaluate(TYPED_JS)
    box = root.get_by_role("textbox", name="Vmax", exact=True)
    box.scroll_into_view_if_needed()
    out: dict[str, list[float]] = {"total": [], "to_send": [], "kernel": [], "to_redraw": []}
    for i in range(n):
        before = cwpage.curve_d(root)
        box.fill(f"{10 + (i % 7) + 0.5:g}")
        page.wait_for_function(
            "([el, d]) => el.querySelector('path.cw-curve').getAttribute('d') !== d",
            arg=[root.element_handle(), before],
            timeout=30_000,
        )
        rec = root.evaluate("(el) => el._cwTyped")
        t_in = rec["inputs"][-1]
        t_path = next(p for p in rec["paths"] if p >= t_in)
        t_sent = next(t for t in rec["sent"] if t >= t_in)
        t_back = next(t for t in rec["arrived"] if t >= t_sent)
        out["total"].append(t_path - t_in)
        out["to_send"].append(t_sent - t_in)
        out["kernel"].append(t_back - t_sent)
        out["to_redraw"].append(t_path - t_back)
        page.wait_for_timeout(200)  # past the 120 ms throttle, so each trip starts fresh
    return out


def review_figures(page: Any, root: Any, n: int) -> dict[str, list[float]]:
    """Overview draw, filter round trip, open a group, and frames while scrolling (384 groups)."""
    root.locator(".cw-review").scroll_into_view_if_needed()
    root.evaluate(REVIEW_DRAW_JS, 5)  # warm-up
    out: dict[str, list[float]] = {"overview_draw": root.evaluate(REVIEW_DRAW_JS, n)}
    root.evaluate(REVIEW_FILTER_JS, 4)
    out["filter_to_redraw"] = root.evaluate(REVIEW_FILTER_JS, max(8, n // 5))
    out["open_to_shown"] = root.evaluate(REVIEW_OPEN_JS, max(6, n // 10))
    # Scroll the overview through its rows (wheel events over the canvas) while recording.
    box = root.locator(".cw-review-overview-wrap").bounding_box()
    assert box is not None
    page.mouse.move(box["x"] + box["width"] / 2, box["y"] + box["height"] / 2)
    root.evaluate(RECORDER_JS)
    for i in range(n):
        page.mouse.wheel(0, 60 if (i // 40) % 2 == 0 else -60)
        page.wait_for_timeout(8)
    rec = root.evaluate(STOP_JS)
    out["scroll_frame_main_thread"] = [w for _, w in rec["work"]]
    return out


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--moves", type=int, default=400, help="mouse moves per drag")
    ap.add_argument("--trips", type=int, default=40, help="kernel round trips per server")
    ap.add_argument("--json", type=Path, help="also write the raw figures here")
    ap.add_argument("--bundle", type=Path, help="measure this widget.js instead of the package's")
    ap.add_argument("--review-only", action="store_true", help="only the 384-group review")
    args = ap.parse_args()

    from playwright.sync_api import sync_playwright

    if not harness.BUNDLE.exists():
        sys.exit(f"the bundle {harness.BUNDLE} is missing: run `npm run build`")
    results: dict[str, Any] = {}
    with sync_playwright() as p, tempfile.TemporaryDirectory() as tmp:
        browser = harness.launch_chromium(p)
        version = browser.version
        for nodelay in (False, True):
            srv = harness.Server(Path(tmp) / f"jp-{int(nodelay)}", app="lab", nodelay=nodelay)
            srv.start()
            try:
                ctx = browser.new_context(viewport={"width": 1280, "height": 1000})
                page = ctx.new_page()
                page.set_default_timeout(60_000)
                if not nodelay:
                    root = open_widget(
                        page, srv, "review384.ipynb", with_bundle(REVIEW_CELL, args.bundle)
                    )
                    results["review of a batch, 384 groups"] = review_figures(page, root, 100)
                    srv.shutdown_kernels()
                if args.review_only:
                    ctx.close()
                    break
                if not nodelay:
                    for n in (1_000, 100_000):
                        root = open_widget(
                            page,
                            srv,
                            f"drag{n}.ipynb",
                            with_bundle(FORMULA_CELL.format(n=n), args.bundle),
                        )
                        drag_frames(page, root, 60, 80)  # warm-up (JIT, first paints)
                        figs = drag_frames(page, root, args.moves, 120)
                        figs["work_idle"] = idle_frames(page, root)
                        results[f"handle drag, {n:,} points"] = figs
                        results[f"pan (points redrawn), {n:,} points"] = drag_frames(
                            page, root, args.moves, 120, pan=True
                        )
                        srv.shutdown_kernels()
                root = open_widget(
                    page,
                    srv,
                    "callable.ipynb",
                    with_bundle(CALLABLE_CELL, args.bundle),
                    handles=False,
                )
                label = "Nagle off" if nodelay else "stock server"
                root.evaluate(PREVIEW_TRIPS_JS, [5, 0])  # warm-up
                results[f"callable preview round trip, {label}"] = {
                    "back_to_back": root.evaluate(PREVIEW_TRIPS_JS, [args.trips, 0]),
                    "spaced_200ms": root.evaluate(PREVIEW_TRIPS_JS, [args.trips, 200]),
                }
                results[f"callable typed value to redraw, {label}"] = typed_round_trips(
                    page, root, max(10, args.trips // 2)
                )
                results[f"callable pin drag (kernel solves), {label}"] = drag_frames(
                    page, root, args.moves, 60, handle_css='[data-handle="pin:0"]'
                )
                ctx.close()
            finally:
                srv.stop()
        browser.close()

    print(f"\ncurvewright widget in the browser: JupyterLab, {version} headless, ", end="")
    print(f"{platform.machine()}, {platform.python_version()}, {time.strftime('%Y-%m-%d')}\n")
    for name, figs in results.items():
        print(name)
        for key, vals in figs.items():
            if key in ("moves_per_s", "redraws_per_s"):
                print(f"  {key:14s} {vals[0]:6.1f}")
            else:
                print(f"  {key:14s} {summary(vals)}")
        if "work_redraw" in figs:
            over = sum(1 for w in figs["work_redraw"] if w > 1000 / 60)
            n = len(figs["work_redraw"])
            print(f"  redraw frames over 16.7 ms of main-thread time: {over} of {n}")
    print_readme_table(results)
    if args.json:
        args.json.write_text(json.dumps(results, indent=1))


def print_readme_table(results: dict[str, Any]) -> None:
    """The figures in two Markdown tables (median / 95th percentile, ms) for README."""

    def mp(vals: list[float]) -> str:
        return f"{statistics.median(vals):.1f} / {pct(vals, 0.95):.1f}"

    cpus = os.cpu_count()
    load = os.getloadavg()[0] if hasattr(os, "getloadavg") else float("nan")
    print(f"\nFor README ({cpus} CPUs, 1-min load average {load:.1f} at the end of the run):\n")
    print(
        "| interaction | frames over 16.7 ms | main-thread frame time | widget JS per frame "
        "| input to redraw |"
    )
    print("| --- | --- | --- | --- | --- |")
    for name, figs in results.items():
        if "work_redraw" not in figs:
            continue
        over = sum(1 for w in figs["work_redraw"] if w > 1000 / 60)
        print(
            f"| {name} | {over} of {len(figs['work_redraw'])} | {mp(figs['work_redraw'])} "
            f"| {mp(figs['widget_js'])} | {mp(figs['latency'])} |"
        )
    print("\n| callable-model preview | round trip (median / p95 ms) |")
    print("| --- | --- |")
    for name, figs in results.items():
        if "work_redraw" in figs or name.startswith("review"):
            continue
        for key, vals in figs.items():
            if key in ("to_send", "to_redraw"):
                continue
            label = {
                "back_to_back": "message to answer, trips back to back",
                "spaced_200ms": "message to answer, trips 200 ms apart",
                "total": "typed value to redrawn curve",
                "kernel": "  of which the kernel round trip",
            }[key]
            server = name.split(",")[-1].strip()
            print(f"| {server}: {label} | {mp(vals)} |")
    review = results.get("review of a batch, 384 groups")
    if review:
        print("\n| review of a batch, 384 groups | median / p95 ms |")
        print("| --- | --- |")
        for key, label in (
            ("overview_draw", "overview drawn (384 small plots, one canvas)"),
            ("filter_to_redraw", "filter click to redrawn overview and table (kernel trip)"),
            ("open_to_shown", "table row to the group in the main plot (kernel trip)"),
            ("scroll_frame_main_thread", "main-thread frame time while scrolling the overview"),
        ):
            print(f"| {label} | {mp(review[key])} |")


if __name__ == "__main__":
    main()
