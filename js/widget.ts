// The widget's entry point (bundled by js/build.mjs into src/curvewright/static/widget.js):
// anywidget's render() builds the page, wires the plot, the parameter panel and the synced
// state, and returns a cleanup that unhooks every listener. Live preview during drags is
// computed here from the model's expression tree; only callable models ask the kernel (their
// curve for typed values, and their pins while dragged), at most once per 120 ms.
//
// ------------------------------------------------------------------------------------------
// Stable DOM contract (browser tests rely on it; change only together with tests/browser/)
// ------------------------------------------------------------------------------------------
//   root                  .cw-root (one per rendered view)
//     data-cw-preview     JSON {param: value} of the curve drawn now (live during a drag)
//     data-cw-model       name of the model shown
//     data-cw-status      fit state: idle | fitting | done | stopped | error
//     data-cw-excluded    JSON array of excluded input rows (sorted)
//     data-cw-fitted      JSON {param: value} of the shown fit, or "" before a fit
//     data-cw-dragging    key of the handle being dragged/nudged, or ""
//   handles               role="slider", focusable (tabindex 0), class .cw-handle,
//                         aria-label "<feature>: moves <params>" (e.g. "EC50: moves log_ec50"),
//                         aria-valuenow (value of the first moved parameter, or the pin's y),
//                         aria-valuetext, data-handle=<handle name> or "pin:<i>";
//                         Arrow keys nudge (1% of the plot), Shift+Arrow 10%. Models without
//                         declared handles get pins (one per free parameter, up to 5); a
//                         Python-callable model's pins are solved by the kernel (throttled).
//   Fit                   the only <button> whose accessible name contains "Fit" (class .cw-fit;
//                         reads "Fitting…" and is disabled while a fit runs)
//   Cancel                <button> "Cancel" (.cw-cancel), hidden unless a fit runs
//   parameter value       <input> labelled exactly by the parameter name (aria-labelledby its
//                         row header); bounds: aria-label "<name> lower bound" / "upper bound"
//                         (match the value input with exact=True)
//   fixed toggle          <input type="checkbox"> aria-label "Fix <name>"
//   model chooser         <select aria-label="Model"> (.cw-model)
//   axis scales           <select aria-label="x axis scale"> / "y axis scale" (linear | log)
//   view                  buttons "Zoom in", "Zoom out", "Reset view"; "Box select" toggles
//                         box exclusion (aria-pressed); Shift+drag boxes too
//   excluded rows field   <input> labelled "Excluded rows" (.cw-excluded-input): rows as text
//                         ("3, 7-9"), applied on Enter or change; keyboard route to exclusion
//   points                drawn on <canvas class="cw-points">; a click within 7 px of a point
//                         toggles its exclusion. root._cwPointXY(row) gives the viewport
//                         {x, y} of an input row's point (null if not drawn) for page.mouse.click
//   status                .cw-status (role="status"): the solver's progress/message
//   display toggles       <input type="checkbox"> labelled exactly "Confidence band",
//                         "Prediction band", "Residuals" (group .cw-toggles, aria-label "Show on
//                         the plot"); synced with show_confidence_band / show_prediction_band /
//                         show_residuals. Bands (95%, the shown fit's) are path.cw-band-confidence
//                         and path.cw-band-prediction (d="" when not drawn); root
//                         data-cw-bands lists the drawn ones ("confidence prediction", "", ...);
//                         why a band is missing: .cw-band-note. The residual strip .cw-resid has
//                         the hidden attribute unless shown.
//   degree table          polynomial models only: table.cw-degree-table in .cw-degrees, one
//                         <tr data-degree=k> per degree (th = degree), the suggested row has class
//                         .cw-suggested, the model's row aria-current="true"; every other row has
//                         a <button> "Use degree <k>" (.cw-use-degree) that switches the model;
//                         root data-cw-degree-suggested = suggested degree ("" without a table);
//                         above 20k included points a <button> "Compute degree table" asks first
//   error area            .cw-error (role="alert"), text in .cw-error-text, button "Dismiss"
//   announcements         .cw-live (aria-live="polite", visually hidden)
//   groups (by=)          root data-cw-group-selected (label), data-cw-groups-hidden and
//                         data-cw-groups-excluded (JSON arrays of labels; all "" for one curve).
//                         Legend .cw-group-legend (role="group", aria-label "Groups"): per group
//                         a .cw-group-entry[data-group=<label>][data-colour][data-marker] with
//                         three <button>s: .cw-group-select (aria-label "Group <label>…",
//                         aria-pressed = selected; arrow keys move between them), .cw-group-hide
//                         (aria-label "Hide group <label>", aria-pressed = hidden) and
//                         .cw-group-exclude (aria-label "Leave group <label> out of the fit",
//                         aria-pressed = excluded). Each sends a message calling the Python method.
//                         Curves: exactly one path[data-cw-group-curve=<label>] per drawn group,
//                         stroke colour in data-colour: the selected group's is path.cw-curve,
//                         the others' are path.cw-group-curve (class cw-group-fitted when at the
//                         group's fitted values, cw-group-excluded when left out); the selected
//                         group's fit is path.cw-curve-fit[data-cw-group-fit=<label>].
//                         Parameter rows <tr data-param=<name> data-scope=shared|per_group>:
//                         checkbox aria-label "Share <name> across groups" (calls set_scope);
//                         ul.cw-group-list > li[data-group][data-value] per group (per-group
//                         parameters only; li[aria-current] is the selected group).
//   review (on a batch)   section .cw-review (aria-label "Batch review"; hidden unless reviewing)
//                         with data-cw-review-filter (all|failed|flagged), data-cw-review-open
//                         (label), data-cw-review-shown (count); root data-cw-review-open.
//                         Filter buttons .cw-review-filter[data-filter] named "All (n)",
//                         "Failed (n)", "Flagged (n)" (aria-pressed = current). Overview
//                         canvas.cw-review-overview; root._cwReview.cellCentre(label) gives a
//                         cell's viewport centre. Button "Accept the refit of group <label> into
//                         the batch" (.cw-review-accept, disabled unless it can be accepted).
//                         Table table.cw-review-table: sort buttons .cw-review-sort[data-sort]
//                         ("Sort by <column>"), rows tr[data-group][data-status] (tabindex 0;
//                         click/Enter/Space opens; data-edited="true"; aria-current = open).
//                         Filter/open/sort/accept call review_filter/review_open/review_sort/
//                         review_accept; the table shows review_state.order.
//   test hook             root._cwModel is the anywidget model (get/set/save_changes/on/off);
//                         flush: set sync_ping to n, save_changes, wait for sync_pong === n
// ------------------------------------------------------------------------------------------

import type { AnyModel, RenderProps } from "@anywidget/types";
import css from "./widget.css";
import { el as h } from "./dom";
import { ExprError, evalCurve, evalScalar } from "./expr";
import { SolveError, type Point } from "./handles";
import {
  PIN_PREFIX,
  curveAt,
  dataRange,
  dragNote,
  formatRows,
  freeParams,
  handleViews,
  parseRows,
  pinViews,
  pinsOnCurve,
  placePins,
  solveDrag,
  solveOptions,
  throttle,
  usesPins,
  withValues,
} from "./interact";
import { atFitted, type GroupsJson, groupStyle, legendEntries, otherCurves, pointGroups, readGroups, valueTable } from "./groups";
import { GroupLegend } from "./legend";
import { bandViews, bandsDrawn, DEGREE_COLUMNS, degreeCaption, degreeLabel, degreeRows, degreeSuggestion } from "./judge";
import { ParamPanel } from "./panel";
import { readReview, readReviewState } from "./review";
import { ReviewPanel } from "./review-panel";
import { ParamsError, byName, readParams, toList } from "./params";
import { type CurveSource, type GroupCurveView, Plot } from "./plot";
import {
  type CompareJson,
  type DataJson,
  type FittedJson,
  type FrontMessage,
  type ModelJson,
  type ParamRecord,
  type PointSet,
  type Scale,
  type WidgetModel,
  readData,
  toggleRows,
  valuesOf,
} from "./state";
import { createUIState } from "./ui-state";
import { formatNumber } from "./validate";

type Model = AnyModel<WidgetModel>;

// A keyboard nudge is sent to Python once the keys have been still this long.
const NUDGE_COMMIT_MS = 350;
// Kernel round trips for callable-model previews: at most one per this interval.
const KERNEL_PREVIEW_MS = 120;


function rowsText(rows: readonly number[]): string {
  const shown = rows.slice(0, 8).join(", ");
  return rows.length > 8 ? `${shown}, … (${rows.length} in all)` : shown;
}

function samples(c: { x: number[]; y: (number | null)[] } | null | undefined): CurveSource {
  return c ? { kind: "samples", x: c.x, y: c.y } : null;
}

function send(model: Model, msg: FrontMessage): void {
  model.send(msg);
}

function render({ model, el }: RenderProps<WidgetModel>): () => void {
  const cleanups: (() => void)[] = [];
  const listen = (event: string, fn: () => void): void => {
    model.on(event, fn);
    cleanups.push(() => model.off(event, fn));
  };

  // ------------------------------------------------------------------ layout
  // data-lm-suppress-shortcuts: Lumino stops looking for notebook shortcuts at this element, so
  // arrow keys on a handle or a select stay in the widget (Notebook 7 would move the cell).
  const root = h("div", { class: "cw-root", "data-lm-suppress-shortcuts": "true" });
  const style = h("style");
  style.textContent = css;
  root.appendChild(style);
  el.appendChild(root);

  const toolbar = h("div", { class: "cw-toolbar", role: "toolbar", "aria-label": "Fitting tools" });
  const modelSelect = h("select", { class: "cw-model", "aria-label": "Model" });
  const xSelect = h("select", { class: "cw-scale cw-xscale", "aria-label": "x axis scale" });
  const ySelect = h("select", { class: "cw-scale cw-yscale", "aria-label": "y axis scale" });
  for (const s of [xSelect, ySelect]) {
    for (const v of ["linear", "log"]) s.appendChild(h("option", { value: v }, v));
  }
  const group = (label: string, control: HTMLElement): HTMLElement => {
    const g = h("span", { class: "cw-field" });
    g.append(h("span", { class: "cw-field-label", "aria-hidden": "true" }, label), control);
    return g;
  };
  const zoomIn = h("button", { type: "button", class: "cw-btn cw-icon", "aria-label": "Zoom in", title: "Zoom in" }, "+");
  const zoomOut = h("button", { type: "button", class: "cw-btn cw-icon", "aria-label": "Zoom out", title: "Zoom out" }, "−");
  const resetView = h("button", { type: "button", class: "cw-btn" }, "Reset view");
  const boxBtn = h("button", { type: "button", class: "cw-btn cw-box", "aria-pressed": "false", title: "Drag a box around points to exclude or re-include them (or Shift+drag)" }, "Box select");
  const guidedBtn = h("button", { type: "button", class: "cw-btn cw-guided", title: "Run the model's guided start again" }, "Guided start");
  const fitBtn = h("button", { type: "button", class: "cw-btn cw-primary cw-fit" }, "Fit");
  const cancelBtn = h("button", { type: "button", class: "cw-btn cw-cancel" }, "Cancel");
  cancelBtn.hidden = true;
  const spacer = h("span", { class: "cw-spacer" });
  toolbar.append(
    group("model", modelSelect),
    group("x", xSelect),
    group("y", ySelect),
    h("span", { class: "cw-sep", "aria-hidden": "true" }),
    zoomIn,
    zoomOut,
    resetView,
    boxBtn,
    guidedBtn,
    spacer,
    fitBtn,
    cancelBtn,
  );
  root.appendChild(toolbar);
  const statusEl = h("div", { class: "cw-status", role: "status" });
  root.appendChild(statusEl);

  const ui = createUIState();
  let mj: ModelJson = model.get("model_json");
  // The `params` trait is the list of records (js/params.ts); looked up by name here.
  const syncedParams = (): Record<string, ParamRecord> => {
    try {
      return byName(readParams(model.get("params") ?? []));
    } catch (e) {
      if (!(e instanceof ParamsError)) throw e;
      console.error(`curvewright: ${e.message}`); // Python sends records of the schema
      return {};
    }
  };
  let params: Record<string, ParamRecord> = syncedParams();
  let points: PointSet = readData(model.get("data"), model.get("excluded"));
  let xScale: Scale = model.get("x_scale");
  let yScale: Scale = model.get("y_scale");
  ui.preview = valuesOf(mj, params);
  // Values typed into the panel but not committed yet (live preview while typing).
  let typing: Record<string, number> = {};
  let nudgeKey: string | null = null;
  let lastNote = "";

  const plot = new Plot(root, {
    onDrag: (key, target, phase) => onDrag(key, target, phase),
    onNudge: (key, dx, dy) => onNudge(key, dx, dy),
    onToggleRows: (rows) => {
      const next = toggleRows(model.get("excluded") ?? [], rows);
      const added = next.length > (model.get("excluded") ?? []).length;
      announce(`${rows.length === 1 ? `point ${rows[0]}` : `${rows.length} points`} ${added ? "excluded" : "included again"}`);
      // set() fires change:excluded here at once (loadData redraws); Python answers later.
      model.set("excluded", next);
      model.save_changes();
    },
  });
  cleanups.push(() => plot.destroy());

  // A quiet key to the line styles (hidden from assistive technology: the same facts are in
  // the status line and the result text).
  const legend = h("div", { class: "cw-legend", "aria-hidden": "true" });
  const swatch = (cls: string, text: string): HTMLElement => {
    const item = h("span", { class: `cw-legend-item ${cls}` });
    item.append(h("span", { class: "cw-swatch" }), h("span", {}, text));
    return item;
  };
  legend.append(
    swatch("cw-legend-start", "curve at the values in the table"),
    swatch("cw-legend-fit", "fitted curve"),
    swatch("cw-legend-confidence", "95% confidence band"),
    swatch("cw-legend-prediction", "95% prediction band"),
    swatch("cw-legend-compare", "earlier fits of other models"),
  );
  root.insertBefore(legend, plot.el);

  // Groups (by=): the legend that selects, hides and leaves out groups; each button asks
  // Python (the method of the same name) and the legend is redrawn from groups_json.
  const groupLegend = new GroupLegend({
    onSelect: (label) => send(model, { type: "select_group", label }),
    onHide: (label, hidden) => send(model, { type: "hide_group", label, hidden }),
    onExclude: (label, excluded) => send(model, { type: "exclude_group", label, excluded }),
  });
  root.insertBefore(groupLegend.el, legend);
  let groups: GroupsJson | null = null;

  // Review of a batch (CurveBench(batch)): overview, filter, table and Accept at the top; each
  // control asks Python (review_open, review_filter, review_accept) and the panel is redrawn
  // from review_json / review_state.
  const reviewPanel = new ReviewPanel({
    onOpen: (label) => send(model, { type: "review_open", label }),
    onFilter: (filter) => send(model, { type: "review_filter", filter }),
    onSort: (key) => send(model, { type: "review_sort", key }),
    onAccept: () => send(model, { type: "review_accept" }),
  });
  root.insertBefore(reviewPanel.el, toolbar);
  (root as unknown as { _cwReview: ReviewPanel })._cwReview = reviewPanel;
  let reviewOpen: string | null = null;
  let reviewRaw: unknown = undefined;
  let reviewParsed: ReturnType<typeof readReview> = null;
  function drawReview(): void {
    const st = readReviewState(model.get("review_state"));
    // The groups are read again only when Python sent new ones (not on every state change).
    const raw = model.get("review_json");
    if (raw !== reviewRaw) {
      reviewRaw = raw;
      reviewParsed = readReview(raw);
    }
    reviewPanel.show(reviewParsed, st);
    root.dataset["cwReviewOpen"] = st.open ?? "";
    if (st.open !== reviewOpen) {
      // Another group in the main plot: its own view, not the last group's zoom.
      const first = reviewOpen === null;
      reviewOpen = st.open;
      if (!first) loadData(true);
    }
  }
  let reviewWidth = 0;
  const reviewResize = new ResizeObserver(() => {
    const w = reviewPanel.el.clientWidth;
    if (w !== reviewWidth && !reviewPanel.el.hidden) {
      reviewWidth = w;
      reviewPanel.drawOverview();
    }
  });
  reviewResize.observe(root);
  cleanups.push(() => reviewResize.disconnect());
  // The selected group is hidden: its points, curves and handles are not drawn.
  let selectedHidden = false;
  let otherKey = "";

  // Display toggles: the fit's bands and the residual strip (synced, so Python can set them).
  const toggles = h("div", { class: "cw-toggles", role: "group", "aria-label": "Show on the plot" });
  const toggleIds = Math.random().toString(36).slice(2);
  const toggle = (
    trait: "show_confidence_band" | "show_prediction_band" | "show_residuals",
    label: string,
    hint: string,
  ): HTMLInputElement => {
    const id = `cw-${trait}-${toggleIds}`;
    const box = h("input", { id, type: "checkbox", class: `cw-toggle cw-toggle-${trait}`, title: hint });
    const wrap = h("span", { class: "cw-toggle-item" });
    wrap.append(box, h("label", { for: id, title: hint }, label));
    toggles.appendChild(wrap);
    return box;
  };
  const confBox = toggle(
    "show_confidence_band",
    "Confidence band",
    "95% pointwise confidence band of the fitted curve over the data's x range: where the true curve lies",
  );
  const predBox = toggle(
    "show_prediction_band",
    "Prediction band",
    "95% pointwise prediction band over the data's x range: where a new single observation falls",
  );
  const residBox = toggle("show_residuals", "Residuals", "The strip of residuals (data minus fit) under the plot");
  const bandNote = h("span", { class: "cw-band-note", "aria-live": "polite" });
  toggles.appendChild(bandNote);
  root.insertBefore(toggles, plot.el.nextSibling);

  // Keyboard access to exclusion: the rows as text ("3, 7-9"), applied on Enter or leaving.
  const exclRow = h("div", { class: "cw-exclusion" });
  const exclId = `cw-excl-${Math.random().toString(36).slice(2)}`;
  const exclLabel = h("label", { for: exclId }, "Excluded rows");
  const exclInput = h("input", {
    id: exclId,
    type: "text",
    class: "cw-excluded-input",
    autocomplete: "off",
    spellcheck: "false",
    placeholder: "none (click or box points, or type rows like 3, 7-9)",
    "aria-describedby": `${exclId}-msg`,
  });
  const exclMsg = h("span", { id: `${exclId}-msg`, class: "cw-msg", "aria-live": "polite" });
  exclRow.append(exclLabel, exclInput, exclMsg);
  root.appendChild(exclRow);
  const notes = h("div", { class: "cw-notes" });
  root.appendChild(notes);
  const compareEl = h("div", { class: "cw-comparison" });
  root.appendChild(compareEl);
  const degreesEl = h("div", { class: "cw-degrees" });
  root.appendChild(degreesEl);

  const panel = new ParamPanel(root, {
    onCommit: (name, setting) => {
      delete typing[name];
      const next = { ...params, [name]: setting };
      commitParams(next);
    },
    onTyping: (name, value) => {
      if (value === null) delete typing[name];
      else typing[name] = value;
      ui.preview = { ...valuesOf(mj, params), ...typing };
      drawCurrent();
    },
    onScope: (name, scope) => send(model, { type: "set_scope", name, scope }),
  });
  cleanups.push(() => panel.destroy());

  const resultEl = h("div", { class: "cw-result" });
  root.appendChild(resultEl);
  const errorEl = h("div", { class: "cw-error", role: "alert" });
  const errorText = h("pre", { class: "cw-error-text" });
  const dismiss = h("button", { type: "button", class: "cw-btn" }, "Dismiss");
  errorEl.append(errorText, dismiss);
  errorEl.hidden = true;
  root.appendChild(errorEl);
  const live = h("div", { class: "cw-live cw-sr-only", "aria-live": "polite" });
  root.appendChild(live);

  // Test hooks (see the contract above).
  const hooks = root as HTMLDivElement & {
    _cwModel?: Model;
    _cwPointXY?: (row: number) => { x: number; y: number } | null;
  };
  hooks._cwModel = model;
  hooks._cwPointXY = (row) => plot.pointClientXY(row);

  function announce(text: string): void {
    live.textContent = text;
  }

  function labelOf(axis: "x" | "y"): string {
    const d: DataJson | null = model.get("data");
    return (axis === "x" ? d?.x_label : d?.y_label) ?? axis;
  }

  // ------------------------------------------------------------------ drawing
  function fixedSet(): Set<string> {
    return new Set(Object.entries(params).filter(([, s]) => s.fixed).map(([n]) => n));
  }

  /** A callable model (no tree): its pins are solved by the kernel. */
  function kernelPins(): boolean {
    return mj.tree === null && mj.handles.length === 0;
  }

  /** Pins of a callable model moved vertically onto the kernel's latest curve samples. */
  function pinsOnSamples(pins: readonly Point[]): Point[] {
    const c = model.get("preview_curve");
    return pins.map((p) => ({ x: p.x, y: curveAt(c, p.x, xScale === "log") }));
  }

  function resetPins(): void {
    if (!usesPins(mj) && !kernelPins()) {
      ui.pins = [];
      return;
    }
    const range = dataRange(points.x, xScale === "log") ?? [0, 1];
    const n = freeParams(mj, params).length;
    ui.pins = kernelPins()
      ? pinsOnSamples(placePins(null, ui.preview, n, range, xScale === "log"))
      : placePins(mj.tree, ui.preview, n, range, xScale === "log");
  }

  function drawCurrent(): void {
    const values = ui.preview;
    if (selectedHidden) {
      plot.setCurve(null);
    } else if (mj.tree !== null) {
      const tree = mj.tree;
      plot.setCurve({ kind: "fn", fn: (xs) => evalCurve(tree, values, xs) });
    } else {
      plot.setCurve(samples(model.get("preview_curve")));
    }
    if (usesPins(mj)) {
      if (ui.pins.length === 0) resetPins();
      else if (!ui.dragging?.startsWith(PIN_PREFIX)) ui.pins = pinsOnCurve(mj.tree, values, ui.pins);
      plot.setHandles(pinViews(ui.pins, freeParams(mj, params)));
    } else if (kernelPins()) {
      if (ui.pins.length === 0) resetPins();
      // Pins without a place on the curve yet (no samples there) are left out.
      const shown = ui.pins.filter((p) => Number.isFinite(p.y));
      plot.setHandles(shown.length === ui.pins.length ? pinViews(ui.pins, freeParams(mj, params)) : []);
    } else {
      plot.setHandles(mj.tree !== null ? handleViews(mj, values, fixedSet()) : []);
    }
    if (selectedHidden) plot.setHandles([]);
    if (ui.dragging !== null || Object.keys(typing).length > 0) panel.setPreview(values);
    const derived = (mj.derived ?? []).flatMap((d) => {
      try {
        return [{ name: d.name, value: evalScalar(d.tree, values), unit: d.unit ?? "", description: d.description ?? "" }];
      } catch {
        return [];
      }
    });
    panel.setDerived(derived);
    root.dataset["cwPreview"] = JSON.stringify(values);
    root.dataset["cwDragging"] = ui.dragging ?? nudgeKey ?? "";
    showNotes();
  }

  function drawFitted(): void {
    const f: FittedJson | null = model.get("fitted");
    const mine = f !== null && (f.model_name === undefined || f.model_name === mj.name);
    legend.classList.toggle("cw-has-fit", mine);
    if (!mine || f === null || selectedHidden) {
      plot.setFitted(null, null);
      root.dataset["cwFitted"] = "";
    } else {
      const tree = mj.tree;
      const vals = f.values;
      const source: CurveSource =
        tree !== null ? { kind: "fn", fn: (xs) => evalCurve(tree, vals, xs) } : samples(f.curve);
      const res = Float64Array.from(f.residuals ?? [], (v) => (typeof v === "number" ? v : NaN));
      plot.setFitted(source, res.length === points.n ? res : null);
      root.dataset["cwFitted"] = JSON.stringify(vals);
    }
    panel.setFitted(mine ? f : null);
    showResult(mine ? f : null);
    drawBands();
  }

  /** Everything drawn of the groups (by=): legend, points' looks, other curves, the table. */
  function drawGroups(): void {
    groups = readGroups(model.get("groups_json"));
    const wasHidden = selectedHidden;
    selectedHidden = groups !== null && groups.hidden.includes(groups.selected);
    groupLegend.show(groups ? legendEntries(groups) : null);
    root.dataset["cwGroupSelected"] = groups?.selected ?? "";
    root.dataset["cwGroupsHidden"] = groups ? JSON.stringify(groups.hidden) : "";
    root.dataset["cwGroupsExcluded"] = groups ? JSON.stringify(groups.excluded) : "";
    plot.setPointGroups(groups ? pointGroups(groups, points.n) : null);
    const sel = groups ? groupStyle(groups.labels.indexOf(groups.selected)) : null;
    plot.setSelectedGroup(groups && sel ? { label: groups.selected, colour: sel.colour } : null);
    // The selected group's colour for its curves, handles, bands and the line key.
    for (const v of ["--cw-curve", "--cw-fit"]) {
      if (sel) root.style.setProperty(v, sel.colour);
      else root.style.removeProperty(v);
    }
    plot.el.classList.toggle("cw-selected-excluded", groups !== null && groups.excluded.includes(groups.selected));
    drawOtherCurves();
    const g = groups;
    panel.setGroups(
      g === null
        ? null
        : {
            selected: g.selected,
            rows: valueTable(g, params).map((r) => ({
              ...r,
              cells: r.cells.map((c) => ({ ...c, style: groupStyle(g.labels.indexOf(c.label)) })),
            })),
          },
    );
    if (wasHidden !== selectedHidden) {
      drawCurrent();
      drawFitted();
    }
  }

  /**
   * The other groups' curves, on the plot's own layer. Not called during a drag (the selected
   * group's curve is the only one a drag redraws); a shared value moved by a drag reaches the
   * other curves when the drag is committed.
   */
  function drawOtherCurves(): void {
    if (groups === null) {
      if (otherKey !== "") plot.setGroupCurves([]);
      otherKey = "";
      return;
    }
    const g = groups;
    const tree = mj.tree;
    const others = otherCurves(g, params);
    const views: GroupCurveView[] = others.map((c) => {
      const vals = c.values;
      return {
        label: c.label,
        colour: c.style.colour,
        excluded: c.excluded,
        fitted: atFitted(g, c.label, vals),
        source: tree !== null ? { kind: "fn", fn: (xs) => evalCurve(tree, vals, xs) } : samples(g.curves?.[c.label]),
      };
    });
    // Skip the redraw when nothing drawn would change (e.g. a selected group's own edit).
    const key = JSON.stringify([mj.name, views.map((v) => [v.label, v.excluded, v.fitted]), others.map((c) => c.values), tree === null ? g.curves : null]);
    if (key === otherKey) return;
    otherKey = key;
    plot.setGroupCurves(views);
  }

  function drawBands(): void {
    const showConf = model.get("show_confidence_band") === true;
    const showPred = model.get("show_prediction_band") === true;
    const showResid = model.get("show_residuals") !== false;
    confBox.checked = showConf;
    predBox.checked = showPred;
    residBox.checked = showResid;
    plot.setResidualsShown(showResid);
    const b = model.get("bands_json");
    const views = bandViews(b, mj.name, showConf, showPred);
    plot.setBands(views);
    root.dataset["cwBands"] = bandsDrawn(views);
    legend.classList.toggle("cw-has-confidence", views.confidence !== null);
    legend.classList.toggle("cw-has-prediction", views.prediction !== null);
    const f: FittedJson | null = model.get("fitted");
    const fitShown = f !== null && (f.model_name === undefined || f.model_name === mj.name);
    let note = "";
    if ((showConf || showPred) && !fitShown) note = "Bands appear after a fit.";
    else if (b && b.model_name === mj.name && b.note) note = b.note;
    if (bandNote.textContent !== note) bandNote.textContent = note;
  }

  function drawDegrees(): void {
    const t = model.get("degree_table_json");
    // A keyboard user who picked a degree keeps focus in the table when it is rebuilt.
    const hadFocus = degreesEl.contains(document.activeElement);
    degreesEl.replaceChildren();
    root.dataset["cwDegreeSuggested"] = t && "rows" in t ? String(t.suggested) : "";
    if (!t) return;
    if (!("rows" in t)) {
      const note = h("p", { class: "cw-degree-note" }, degreeSuggestion(t));
      if ("deferred" in t) {
        const b = h("button", { type: "button", class: "cw-btn cw-degree-compute" }, "Compute degree table");
        b.addEventListener("click", () => {
          b.disabled = true;
          b.textContent = "Computing…";
          send(model, { type: "degree_table" });
        });
        note.append(" ", b);
      }
      degreesEl.appendChild(note);
      return;
    }
    const table = h("table", { class: "cw-degree-table" });
    table.appendChild(h("caption", {}, degreeCaption(t)));
    const head = h("tr");
    for (const c of DEGREE_COLUMNS) head.appendChild(h("th", { scope: "col" }, c));
    const actionHead = h("th", { scope: "col" });
    actionHead.appendChild(h("span", { class: "cw-sr-only" }, "Model"));
    head.appendChild(actionHead);
    table.appendChild(h("thead")).appendChild(head);
    const body = h("tbody");
    for (const r of degreeRows(t)) {
      const attrs: Record<string, string> = { "data-degree": String(r.degree) };
      const cls = [r.suggested ? "cw-suggested" : "", r.current ? "cw-current" : "", r.significant ? "" : "cw-not-significant"].filter(Boolean);
      if (cls.length) attrs["class"] = cls.join(" ");
      if (r.current) attrs["aria-current"] = "true";
      const tr = h("tr", attrs);
      const th = h("th", { scope: "row" }, degreeLabel(r.degree));
      if (r.suggested) th.appendChild(h("span", { class: "cw-tag" }, " suggested"));
      tr.appendChild(th);
      for (const c of r.cells) tr.appendChild(h("td", {}, c));
      const act = h("td", { class: "cw-degree-action" });
      if (r.current) {
        act.appendChild(h("span", { class: "cw-tag" }, "shown"));
      } else {
        const b = h("button", { type: "button", class: "cw-btn cw-use-degree" }, `Use degree ${r.degree}`);
        b.addEventListener("click", () => send(model, { type: "use_degree", degree: r.degree }));
        act.appendChild(b);
      }
      tr.appendChild(act);
      body.appendChild(tr);
    }
    table.appendChild(body);
    degreesEl.appendChild(table);
    if (hadFocus) table.querySelector<HTMLButtonElement>("button")?.focus({ preventScroll: true });
    degreesEl.appendChild(h("p", { class: "cw-recommendation" }, degreeSuggestion(t)));
    degreesEl.appendChild(h("p", { class: "cw-degree-reasoning" }, t.reasoning));
    if (t.warnings.length) {
      const ul = h("ul", { class: "cw-diagnostics" });
      for (const w of t.warnings) ul.appendChild(h("li", { class: "cw-warning" }, w));
      degreesEl.appendChild(ul);
    }
  }

  function drawCompare(): void {
    const list: CompareJson[] = model.get("compare") ?? [];
    const cmp = model.get("comparison_json");
    const weights = new Map<string, number | null>();
    if (cmp && "table" in cmp) for (const row of cmp.table) weights.set(row.fit, row.akaike_weight);
    plot.setCompare(list.filter((c) => !c.current).map((c) => ({ name: c.model_name, source: samples(c.curve) })));
    legend.classList.toggle("cw-has-compare", list.some((c) => !c.current));
    compareEl.replaceChildren();
    if (list.length < 2) return;
    const table = h("table", { class: "cw-fits" });
    table.appendChild(h("caption", {}, "Fits so far (the current model is marked; other models' fits are drawn dotted)"));
    const head = h("tr");
    for (const t of ["model", "free parameters", "n", "SSR", "R²", "AICc", "Akaike weight"]) {
      head.appendChild(h("th", { scope: "col" }, t));
    }
    table.appendChild(h("thead")).appendChild(head);
    const body = h("tbody");
    const best = Math.min(...list.map((c) => (typeof c.aicc === "number" ? c.aicc : Infinity)));
    for (const c of list) {
      const tr = h("tr", c.current ? { class: "cw-current", "aria-current": "true" } : {});
      tr.append(
        h("th", { scope: "row" }, `${c.model_name}${c.success ? "" : " (not converged)"}`),
        h("td", {}, String(c.nfree)),
        h("td", {}, String(c.n)),
        h("td", {}, formatNumber(c.ssr, 5)),
        h("td", {}, formatNumber(c.r2, 4)),
        h("td", {}, `${formatNumber(c.aicc, 5)}${c.aicc === best && list.length > 1 ? " (lowest)" : ""}`),
        h("td", {}, weights.has(c.model_name) ? formatNumber(weights.get(c.model_name), 3) : "–"),
      );
      body.appendChild(tr);
    }
    table.appendChild(body);
    compareEl.appendChild(table);
    if (cmp && "error" in cmp) {
      compareEl.appendChild(h("p", { class: "cw-compare-note" }, `Not compared: ${cmp.error}`));
    } else if (cmp) {
      compareEl.appendChild(h("p", { class: "cw-recommendation" }, cmp.recommendation));
      const ul = h("ul", { class: "cw-reasoning" });
      for (const r of cmp.reasoning) ul.appendChild(h("li", {}, r));
      compareEl.appendChild(ul);
    }
  }

  function showResult(f: FittedJson | null): void {
    resultEl.replaceChildren();
    if (f === null) return;
    const s = f.stats;
    const head = h("div", { class: "cw-result-head" });
    head.appendChild(h("span", { class: f.success === false ? "cw-bad" : "cw-good" }, f.success === false ? "not converged" : "fitted"));
    if (s) {
      head.appendChild(
        h(
          "span",
          {},
          ` n = ${s.n}, dof = ${s.dof}, SSR = ${formatNumber(s.ssr, 5)}, residual SD = ${formatNumber(s.sigma_resid, 4)}, R² = ${formatNumber(s.r2, 4)}, AICc = ${formatNumber(s.aicc, 5)}`,
        ),
      );
    }
    if (f.excluded && f.excluded.length) head.appendChild(h("span", {}, `; excluded rows ${rowsText(f.excluded)}`));
    resultEl.appendChild(head);
    if (f.derived && f.derived.length) {
      const level = Math.round((f.ci_level ?? 0.95) * 100);
      const dl = h("dl", { class: "cw-derived-fit" });
      for (const d of f.derived) {
        const ci = d.lower !== null && d.upper !== null ? ` (${level}% CI ${formatNumber(d.lower, 4)} to ${formatNumber(d.upper, 4)})` : "";
        dl.append(h("dt", {}, d.name), h("dd", {}, `${formatNumber(d.value, 5)}${d.unit ? ` ${d.unit}` : ""}${ci}${d.extrapolated ? " — extrapolated beyond the data" : ""}`));
      }
      resultEl.appendChild(dl);
    }
    if (f.diagnostics && f.diagnostics.length) {
      const ul = h("ul", { class: "cw-diagnostics" });
      for (const d of f.diagnostics) ul.appendChild(h("li", { class: `cw-${d.severity}` }, d.text));
      resultEl.appendChild(ul);
    }
    if (f.caution) resultEl.appendChild(h("p", { class: "cw-caution" }, f.caution));
  }

  function showNotes(): void {
    const d: DataJson | null = model.get("data");
    const lines: string[] = [];
    if (ui.dragNote) lines.push(ui.dragNote);
    const off = d?.off_axis ?? [];
    if (off.length) {
      const why = [xScale === "log" ? "x ≤ 0" : "", yScale === "log" ? "y ≤ 0" : ""].filter(Boolean).join(" or ");
      lines.push(`${off.length} point${off.length > 1 ? "s" : ""} not drawn (${why} cannot sit on a log axis): rows ${rowsText(off)}; ${off.length > 1 ? "they are" : "it is"} still fitted unless excluded.`);
    }
    const outside = d?.outside_domain ?? [];
    if (outside.length) lines.push(`rows ${rowsText(outside)} lie outside the model's domain (${mj.domain}); exclude them to fit this model.`);
    if (d?.decimated) lines.push(`showing ${points.n.toLocaleString()} of ${(d.n_total ?? points.n).toLocaleString()} points (thinned for drawing; the fit uses all of them).`);
    const text = lines.join("\n");
    if (text !== lastNote) {
      lastNote = text;
      notes.textContent = text;
    }
  }

  function showStatus(): void {
    const s = model.get("status") ?? { state: "idle", message: "" };
    const fitting = s.state === "fitting";
    fitBtn.disabled = fitting;
    fitBtn.textContent = fitting ? "Fitting…" : "Fit";
    cancelBtn.hidden = !fitting;
    guidedBtn.disabled = fitting;
    statusEl.textContent = s.message ?? "";
    statusEl.className = `cw-status cw-state-${s.state}`;
    root.dataset["cwStatus"] = s.state;
  }

  function showError(): void {
    const text = model.get("error") ?? "";
    errorText.textContent = text;
    errorEl.hidden = text === "";
  }

  function fillModels(): void {
    const names = model.get("model_names") ?? [];
    modelSelect.replaceChildren(...names.map((n) => h("option", { value: n }, n)));
    modelSelect.value = model.get("model_name");
  }

  function loadModel(resetViewToo: boolean): void {
    mj = model.get("model_json");
    params = syncedParams();
    typing = {};
    ui.preview = valuesOf(mj, params);
    ui.pins = [];
    ui.dragNote = "";
    modelSelect.value = model.get("model_name");
    root.dataset["cwModel"] = mj.name;
    panel.setModel(mj, params);
    if (resetViewToo) plot.resetView();
    drawCurrent();
    drawFitted();
    drawCompare();
    drawDegrees();
    otherKey = "";
    drawGroups();
  }

  function loadData(resetViewToo: boolean): void {
    points = readData(model.get("data"), model.get("excluded"));
    plot.setData(points, labelOf("x"), labelOf("y"), resetViewToo);
    root.dataset["cwExcluded"] = JSON.stringify(model.get("excluded") ?? []);
    if (document.activeElement !== exclInput) exclInput.value = formatRows(model.get("excluded") ?? []);
  }

  function applyRowsField(): void {
    const d: DataJson | null = model.get("data");
    const parsed = parseRows(exclInput.value, d?.n_input ?? d?.n_total ?? points.n);
    if (!parsed.ok) {
      exclMsg.textContent = `${parsed.message}; not applied.`;
      exclInput.setAttribute("aria-invalid", "true");
      return;
    }
    exclMsg.textContent = "";
    exclInput.removeAttribute("aria-invalid");
    const current = model.get("excluded") ?? [];
    if (formatRows(parsed.rows) === formatRows(current)) return;
    model.set("excluded", parsed.rows);
    model.save_changes();
    announce(`${parsed.rows.length} point${parsed.rows.length === 1 ? "" : "s"} excluded`);
  }

  // ------------------------------------------------------------------ interactions
  function commitParams(next: Record<string, ParamRecord>): void {
    params = next;
    model.set("params", toList(next));
    model.save_changes();
    ui.preview = { ...valuesOf(mj, params), ...typing };
    drawCurrent();
    if (groups !== null) drawGroups();
  }

  let dragQueued: { key: string; target: Point } | null = null;
  let dragFrame: number | null = null;

  function solveNow(key: string, target: Point): void {
    const opts = solveOptions(mj, params, xScale === "log", yScale === "log", plot.visibleSpan());
    try {
      const res = solveDrag(mj, key, ui.preview, target, ui.pins, opts);
      if (res !== null) {
        ui.preview = res.params;
        if (key.startsWith(PIN_PREFIX)) {
          const i = Number(key.slice(PIN_PREFIX.length));
          const moved = ui.pins.map((p, j) => (j === i ? { x: target.x, y: p.y } : p));
          ui.pins = pinsOnCurve(mj.tree, ui.preview, moved);
        }
      }
      ui.dragNote = dragNote(res);
    } catch (e) {
      if (!(e instanceof SolveError || e instanceof ExprError)) throw e;
      ui.dragNote = e.message;
    }
    drawCurrent();
  }

  // Callable models: pins go to the kernel, which solves and sends the curve back (throttled).
  let pinSeq = 0;
  const sendPins = (final: boolean): void => {
    const { x } = plot.scales();
    const [x0, x1] = x.domain() as [number, number];
    send(model, {
      type: "pins",
      pins: ui.pins.map((p) => [p.x, p.y] as [number, number]),
      values: { ...ui.preview },
      x_min: Math.min(x0, x1),
      x_max: Math.max(x0, x1),
      final,
      seq: ++pinSeq,
    });
  };
  const kernelPinsThrottle = throttle(() => sendPins(false), KERNEL_PREVIEW_MS);
  cleanups.push(() => kernelPinsThrottle.cancel());

  function movePin(key: string, target: Point): void {
    const i = Number(key.slice(PIN_PREFIX.length));
    ui.pins = ui.pins.map((p, j) => (j === i ? target : p));
    plot.setHandles(pinViews(ui.pins, freeParams(mj, params)));
  }

  function onKernelDrag(key: string, target: Point, phase: "start" | "move" | "end"): void {
    if (phase === "start") {
      ui.dragging = key;
      typing = {};
      return;
    }
    movePin(key, target);
    if (phase === "move") {
      kernelPinsThrottle.call(undefined);
      return;
    }
    kernelPinsThrottle.cancel();
    ui.dragging = null;
    sendPins(true);
  }

  function onDrag(key: string, target: Point, phase: "start" | "move" | "end"): void {
    if (kernelPins()) {
      onKernelDrag(key, target, phase);
      return;
    }
    if (phase === "start") {
      ui.dragging = key;
      typing = {};
      return;
    }
    dragQueued = { key, target };
    if (phase === "move") {
      if (dragFrame === null) {
        dragFrame = requestAnimationFrame(() => {
          dragFrame = null;
          const q = dragQueued;
          dragQueued = null;
          if (q) solveNow(q.key, q.target);
        });
      }
      return;
    }
    if (dragFrame !== null) cancelAnimationFrame(dragFrame);
    dragFrame = null;
    const q = dragQueued;
    dragQueued = null;
    if (q) solveNow(q.key, q.target);
    ui.dragging = null;
    commitParams(withValues(params, ui.preview));
    announce(`moved ${key}: ${Object.entries(ui.preview).map(([n, v]) => `${n} ${formatNumber(v, 4)}`).join(", ")}`);
  }

  function onNudge(key: string, dx: number, dy: number): void {
    const views = usesPins(mj) || kernelPins() ? pinViews(ui.pins, []) : handleViews(mj, ui.preview, fixedSet());
    const v = views.find((w) => w.key === key);
    if (!v) return;
    const { px, py } = plot.project(v.pos);
    const { w, h: hgt } = plot.plotSize();
    // A handle drawn at the edge (off view) is nudged from where it is drawn.
    const cx = Number.isFinite(px) ? Math.max(0, Math.min(w, px)) : w / 2;
    const cy = Number.isFinite(py) ? Math.max(0, Math.min(hgt, py)) : hgt / 2;
    nudgeKey = key;
    if (kernelPins()) {
      movePin(key, plot.invert(cx + dx, cy + dy));
      kernelPinsThrottle.call(undefined);
    } else {
      solveNow(key, plot.invert(cx + dx, cy + dy));
    }
    if (ui.nudgeTimer !== null) clearTimeout(ui.nudgeTimer);
    ui.nudgeTimer = window.setTimeout(() => {
      ui.nudgeTimer = null;
      nudgeKey = null;
      if (kernelPins()) {
        kernelPinsThrottle.cancel();
        sendPins(true);
      } else {
        commitParams(withValues(params, ui.preview));
      }
    }, NUDGE_COMMIT_MS);
  }
  cleanups.push(() => {
    if (ui.nudgeTimer !== null) clearTimeout(ui.nudgeTimer);
    if (dragFrame !== null) cancelAnimationFrame(dragFrame);
  });

  // Callable models: the kernel evaluates the curve for typed values (throttled).
  const kernelPreview = throttle((values: Record<string, number>) => {
    const { x } = plot.scales();
    const [x0, x1] = x.domain() as [number, number];
    send(model, { type: "preview", values, x_min: Math.min(x0, x1), x_max: Math.max(x0, x1) });
  }, KERNEL_PREVIEW_MS);
  cleanups.push(() => kernelPreview.cancel());

  // ------------------------------------------------------------------ controls
  const on = <K extends keyof HTMLElementEventMap>(
    target: HTMLElement,
    type: K,
    fn: (e: HTMLElementEventMap[K]) => void,
  ): void => {
    target.addEventListener(type, fn);
    cleanups.push(() => target.removeEventListener(type, fn));
  };
  on(modelSelect, "change", () => {
    model.set("model_name", modelSelect.value);
    model.save_changes();
  });
  on(xSelect, "change", () => {
    model.set("x_scale", xSelect.value as Scale);
    model.save_changes();
  });
  on(ySelect, "change", () => {
    model.set("y_scale", ySelect.value as Scale);
    model.save_changes();
  });
  on(zoomIn, "click", () => plot.zoomBy(1.5));
  on(zoomOut, "click", () => plot.zoomBy(1 / 1.5));
  on(resetView, "click", () => plot.resetView());
  on(boxBtn, "click", () => {
    ui.boxMode = !ui.boxMode;
    boxBtn.setAttribute("aria-pressed", String(ui.boxMode));
    plot.setBoxMode(ui.boxMode);
  });
  on(guidedBtn, "click", () => send(model, { type: "guided_start" }));
  on(fitBtn, "click", () => {
    // The request carries the state the person sees: a state update still buffered by the
    // widget manager (one is sent at a time) could otherwise reach Python after the request.
    send(model, {
      type: "fit",
      model_name: mj.name,
      params: toList(withValues(params, ui.dragging === null ? ui.preview : valuesOf(mj, params))),
      excluded: model.get("excluded") ?? [],
    });
  });
  on(cancelBtn, "click", () => send(model, { type: "cancel" }));
  const onToggle = (
    box: HTMLInputElement,
    trait: "show_confidence_band" | "show_prediction_band" | "show_residuals",
  ): void => {
    on(box, "change", () => {
      model.set(trait, box.checked);
      model.save_changes();
      drawBands(); // hide at once; a band switched on appears when Python sends it
    });
  };
  onToggle(confBox, "show_confidence_band");
  onToggle(predBox, "show_prediction_band");
  onToggle(residBox, "show_residuals");
  on(exclInput, "keydown", (e) => {
    if (e.key === "Enter") {
      e.preventDefault();
      applyRowsField();
    }
  });
  on(exclInput, "change", applyRowsField);
  on(dismiss, "click", () => {
    model.set("error", "");
    model.save_changes();
  });

  // ------------------------------------------------------------------ synced state
  listen("change:model_names", fillModels);
  listen("change:model_json", () => loadModel(false));
  listen("change:model_name", () => {
    modelSelect.value = model.get("model_name");
  });
  listen("change:params", () => {
    params = syncedParams();
    panel.setSettings(params);
    if (ui.dragging === null && nudgeKey === null) {
      const before = freeParams(mj, params).length;
      ui.preview = { ...valuesOf(mj, params), ...typing };
      if ((usesPins(mj) || kernelPins()) && before !== ui.pins.length) ui.pins = [];
      drawCurrent();
    }
    if (groups !== null) drawGroups();
  });
  listen("change:data", () => {
    loadData(false);
    drawGroups();
    drawFitted();
    drawCurrent();
  });
  listen("change:groups_json", drawGroups);
  listen("change:review_json", drawReview);
  listen("change:review_state", drawReview);
  listen("change:excluded", () => {
    loadData(false);
  });
  listen("change:x_scale", () => {
    xScale = model.get("x_scale");
    xSelect.value = xScale;
    plot.setScales(xScale, yScale);
    ui.pins = [];
    drawCurrent();
  });
  listen("change:y_scale", () => {
    yScale = model.get("y_scale");
    ySelect.value = yScale;
    plot.setScales(xScale, yScale);
    drawCurrent();
  });
  listen("change:fitted", drawFitted);
  listen("change:bands_json", drawBands);
  listen("change:show_confidence_band", drawBands);
  listen("change:show_prediction_band", drawBands);
  listen("change:show_residuals", drawBands);
  listen("change:degree_table_json", drawDegrees);
  listen("change:compare", drawCompare);
  listen("change:comparison_json", drawCompare);
  listen("change:status", showStatus);
  listen("change:error", showError);
  listen("change:preview_curve", () => {
    if (mj.tree !== null) return;
    const pc = model.get("preview_curve") as
      | ({ values?: Record<string, number>; pins?: [number, number | null][] } & object)
      | null;
    if (pc?.values && ui.dragging === null) ui.preview = { ...pc.values, ...typing };
    else if (pc?.values) ui.preview = { ...pc.values };
    if (kernelPins() && ui.pins.length) {
      // Pins follow the kernel's curve, except the one under the pointer.
      const held = ui.dragging ?? nudgeKey;
      ui.pins = pinsOnSamples(ui.pins).map((p, i) => (held === `${PIN_PREFIX}${i}` ? ui.pins[i]! : p));
    }
    drawCurrent();
  });

  // Callable models preview typed values through the kernel.
  const panelTyping = (): void => {
    if (mj.tree === null && Object.keys(typing).length) kernelPreview.call({ ...valuesOf(mj, params), ...typing });
  };
  on(panel.el, "input", panelTyping);

  // ------------------------------------------------------------------ first draw
  xSelect.value = xScale;
  ySelect.value = yScale;
  fillModels();
  plot.setScales(xScale, yScale);
  loadData(true);
  loadModel(false);
  showStatus();
  showError();
  drawReview();

  return () => {
    for (const c of cleanups.reverse()) c();
    root.remove();
  };
}

export default { render };
