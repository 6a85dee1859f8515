// The review panel (a widget made on a batch): the filter buttons with their counts, the
// overview of the shown groups as small multiples on one canvas (js/review.ts draws it), the
// group open in the main plot with its Accept button, and the sortable table of groups. UI only:
// the filter, opening a group, sorting the table and accepting ask Python (review_filter,
// review_open, review_sort, review_accept) and the panel is redrawn from the `review_json` /
// `review_state` traits.

import { el } from "./dom";
import {
  FILTERS,
  type Canvas2D,
  type Filter,
  type GridLayout,
  type ReviewJson,
  type ReviewState,
  STATUS_STYLE,
  type SortKey,
  cellAt,
  drawOverview,
  filterGroups,
  filterText,
  gridLayout,
  tableRows,
  statusCounts,
} from "./review";
import { formatNumber } from "./validate";

export interface ReviewCallbacks {
  onOpen(label: string): void;
  onFilter(filter: Filter): void;
  onSort(key: SortKey): void;
  onAccept(): void;
}

/** Smallest cell of the overview (CSS px); the canvas scrolls past a few rows. */
const MIN_CELL = 72;

export class ReviewPanel {
  readonly el: HTMLElement;
  private readonly cb: ReviewCallbacks;
  private readonly counts: HTMLSpanElement;
  private readonly filterButtons = new Map<Filter, HTMLButtonElement>();
  private readonly canvas: HTMLCanvasElement;
  private readonly openLine: HTMLSpanElement;
  private readonly acceptBtn: HTMLButtonElement;
  private readonly table: HTMLTableElement;
  private review: ReviewJson | null = null;
  private state: ReviewState = {
    filter: "all",
    open: null,
    canAccept: false,
    accepted: false,
    sort: { key: "label", ascending: true },
    order: null,
  };
  private shown: number[] = [];
  private layout: GridLayout | null = null;
  private tableOf: ReviewJson | null = null;
  private tableKey = "";
  /** The sort button clicked last: focused again once Python's new order redraws the table. */
  private refocusSort: string | null = null;
  /** Milliseconds the last overview draw took (read by the frame benchmark). */
  lastDrawMs = 0;

  constructor(cb: ReviewCallbacks) {
    this.cb = cb;
    this.el = el("section", { class: "cw-review", "aria-label": "Batch review" });
    this.el.hidden = true;
    const head = el("div", { class: "cw-review-head" });
    head.append(el("span", { class: "cw-review-title" }, "Batch review"));
    this.counts = el("span", { class: "cw-review-counts" });
    head.append(this.counts);
    const filters = el("div", { class: "cw-review-filters", role: "group", "aria-label": "Show groups" });
    for (const f of FILTERS) {
      const b = el("button", { type: "button", class: "cw-btn cw-review-filter", "data-filter": f, "aria-pressed": "false" });
      b.addEventListener("click", () => this.cb.onFilter(f));
      this.filterButtons.set(f, b);
      filters.append(b);
    }
    head.append(filters);
    this.el.append(head);

    const wrap = el("div", { class: "cw-review-overview-wrap" });
    this.canvas = el("canvas", {
      class: "cw-review-overview",
      role: "img",
      "aria-label": "Overview of the shown groups, one small plot each; open a group from the table below",
    });
    this.canvas.addEventListener("click", (ev) => {
      const k = this.cellFromEvent(ev);
      const g = k === null ? undefined : this.review?.groups[this.shown[k]!];
      if (g) this.cb.onOpen(g.label);
    });
    wrap.append(this.canvas);
    this.el.append(wrap);

    const open = el("div", { class: "cw-review-open-row" });
    this.openLine = el("span", { class: "cw-review-open" });
    this.acceptBtn = el("button", { type: "button", class: "cw-btn cw-primary cw-review-accept" }, "Accept refit");
    this.acceptBtn.addEventListener("click", () => this.cb.onAccept());
    open.append(this.openLine, this.acceptBtn);
    this.el.append(open);

    const tableWrap = el("div", { class: "cw-review-table-wrap" });
    this.table = el("table", { class: "cw-review-table" });
    this.table.addEventListener("keydown", (ev) => {
      const tr = (ev.target as HTMLElement | null)?.closest?.("tr[data-group]") as HTMLTableRowElement | null;
      if (!tr) return;
      if (ev.key === "Enter" || ev.key === " ") {
        ev.preventDefault();
        this.cb.onOpen(tr.dataset["group"]!);
      } else if (ev.key === "ArrowDown" || ev.key === "ArrowUp") {
        const next = (ev.key === "ArrowDown" ? tr.nextElementSibling : tr.previousElementSibling) as HTMLElement | null;
        if (next) {
          ev.preventDefault();
          ev.stopPropagation();
          next.focus();
        }
      }
    });
    tableWrap.append(this.table);
    this.el.append(tableWrap);
  }

  /** Which shown cell (index into the shown list) a mouse event falls on. */
  private cellFromEvent(ev: MouseEvent): number | null {
    if (!this.layout) return null;
    const r = this.canvas.getBoundingClientRect();
    return cellAt(ev.clientX - r.left, ev.clientY - r.top, this.layout, this.shown.length);
  }

  /** Viewport centre of a group's cell in the overview, or null when not shown (for tests). */
  cellCentre(label: string): { x: number; y: number } | null {
    if (!this.review || !this.layout) return null;
    const k = this.shown.findIndex((gi) => this.review!.groups[gi]!.label === label);
    if (k < 0) return null;
    const r = this.canvas.getBoundingClientRect();
    const c = k % this.layout.cols;
    const row = Math.floor(k / this.layout.cols);
    return {
      x: r.left + c * (this.layout.cellW + this.layout.gap) + this.layout.cellW / 2,
      y: r.top + row * (this.layout.cellH + this.layout.gap) + this.layout.cellH / 2,
    };
  }

  show(review: ReviewJson | null, state: ReviewState): void {
    this.review = review;
    this.state = state;
    this.el.hidden = review === null;
    if (review === null) return;
    const counts = statusCounts(review.groups);
    this.counts.textContent = `${review.groups.length} groups: ${counts.ok} ok, ${counts.flagged} flagged, ${counts.failed} failed`;
    for (const [f, b] of this.filterButtons) {
      b.textContent = filterText(f, counts);
      b.setAttribute("aria-pressed", String(f === state.filter));
    }
    this.shown = filterGroups(review.groups, state.filter);
    const g = review.groups.find((x) => x.label === state.open);
    this.openLine.textContent = g
      ? `In the plot: group ${g.label}, ${STATUS_STYLE[g.status].word}${g.reason ? ` (${g.reason})` : ""}${g.edited ? `; edited: ${g.note}` : ""}`
      : "Open a group from the overview or the table";
    this.acceptBtn.disabled = !state.canAccept;
    this.acceptBtn.setAttribute(
      "aria-label",
      g ? `Accept the refit of group ${g.label} into the batch` : "Accept the refit into the batch",
    );
    this.acceptBtn.title = state.canAccept ? "Write this refit into the batch" : state.accepted ? "This refit is in the batch" : "Fit the group first";
    this.el.dataset["cwReviewFilter"] = state.filter;
    this.el.dataset["cwReviewOpen"] = state.open ?? "";
    this.el.dataset["cwReviewShown"] = String(this.shown.length);
    this.drawOverview();
    // The table is rebuilt when its rows change; opening another group only moves the marker.
    const key = `${state.filter}|${state.sort.key}|${state.sort.ascending}|${(state.order ?? []).join(",")}`;
    if (review !== this.tableOf || key !== this.tableKey) {
      this.tableOf = review;
      this.tableKey = key;
      this.drawTable();
      if (this.refocusSort !== null) {
        const b = this.table.querySelector(`button[data-sort="${CSS.escape(this.refocusSort)}"]`) as HTMLElement | null;
        b?.focus();
        this.refocusSort = null;
      }
    } else {
      for (const tr of this.table.querySelectorAll<HTMLTableRowElement>("tr[data-group]")) {
        if (tr.dataset["group"] === state.open) tr.setAttribute("aria-current", "true");
        else tr.removeAttribute("aria-current");
      }
    }
  }

  /** Redraw the small multiples at the panel's width (also on resize). */
  drawOverview(): number {
    const review = this.review;
    if (review === null) return 0;
    const t0 = performance.now();
    const width = Math.max(MIN_CELL, (this.el.clientWidth || 640) - 2);
    const layout = gridLayout(this.shown.length, width, MIN_CELL, 4, 0.7);
    this.layout = layout;
    const dpr = window.devicePixelRatio || 1;
    this.canvas.width = Math.max(1, Math.round(layout.width * dpr));
    this.canvas.height = Math.max(1, Math.round(layout.height * dpr));
    this.canvas.style.width = `${layout.width}px`;
    this.canvas.style.height = `${layout.height}px`;
    const ctx = this.canvas.getContext("2d");
    if (ctx === null) return 0;
    ctx.setTransform(dpr, 0, 0, dpr, 0, 0);
    const selected = review.groups.findIndex((x) => x.label === this.state.open);
    const n = drawOverview(ctx as unknown as Canvas2D, review, this.shown, layout, selected < 0 ? null : selected);
    this.lastDrawMs = performance.now() - t0;
    return n;
  }

  private drawTable(): void {
    const review = this.review!;
    const t = this.table;
    t.replaceChildren();
    t.append(el("caption", {}, "Groups (select a row, or press Enter on it, to open the group in the plot)"));
    const head = el("tr");
    const cols: { key: SortKey; text: string }[] = [
      { key: "label", text: "Group" },
      { key: "status", text: "Status" },
      ...review.columns.map((c) => ({ key: c, text: c })),
    ];
    for (const c of cols) {
      const th = el("th", { scope: "col" });
      const sort = this.state.sort;
      const on = sort.key === c.key;
      th.setAttribute("aria-sort", on ? (sort.ascending ? "ascending" : "descending") : "none");
      const b = el(
        "button",
        { type: "button", class: "cw-review-sort", "data-sort": c.key, "aria-label": `Sort by ${c.text}` },
        c.text + (on ? (sort.ascending ? " ▲" : " ▼") : ""),
      );
      b.addEventListener("click", () => {
        this.refocusSort = c.key;
        this.cb.onSort(c.key);
      });
      th.append(b);
      head.append(th);
    }
    head.append(el("th", { scope: "col" }, "Reason / note"));
    const thead = el("thead");
    thead.append(head);
    t.append(thead);
    const body = el("tbody");
    for (const gi of tableRows(this.shown, this.state.order)) {
      const g = review.groups[gi]!;
      const tr = el("tr", { "data-group": g.label, "data-status": g.status, tabindex: "0", class: `cw-review-row cw-review-${g.status}` });
      if (g.edited) tr.dataset["edited"] = "true";
      if (g.label === this.state.open) tr.setAttribute("aria-current", "true");
      tr.addEventListener("click", () => this.cb.onOpen(g.label));
      tr.append(el("th", { scope: "row" }, g.label + (g.edited ? " ✎" : "")));
      const st = el("td", { class: "cw-review-status" });
      st.append(el("span", { class: `cw-review-chip cw-review-chip-${g.status}`, "aria-hidden": "true" }), STATUS_STYLE[g.status].word);
      tr.append(st);
      for (const c of review.columns) tr.append(el("td", {}, formatNumber(g.values[c] ?? null, 4)));
      tr.append(el("td", { class: "cw-review-reason" }, [g.reason, g.edited ? `edited: ${g.note}` : ""].filter(Boolean).join("; ")));
      body.append(tr);
    }
    t.append(body);
  }
}
