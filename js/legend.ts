// The group legend (a widget made with by=): one entry per group with its marker, colour and
// label. The entry's main button selects the group (its curve gets the handles, its values the
// table); two small toggles hide the group or leave it out of the fit. UI only: every button
// asks Python (through the callbacks) and the legend is redrawn from the `groups_json` trait.

import { el } from "./dom";
import { type LegendEntry, markerSvgPath } from "./groups";

export interface LegendCallbacks {
  onSelect(label: string): void;
  onHide(label: string, hidden: boolean): void;
  onExclude(label: string, excluded: boolean): void;
}

const SVG_NS = "http://www.w3.org/2000/svg";

/** A small SVG of the group's marker in its colour, with a short line of its curve. */
function swatch(e: LegendEntry): SVGSVGElement {
  const svg = document.createElementNS(SVG_NS, "svg");
  svg.setAttribute("class", "cw-group-swatch");
  svg.setAttribute("width", "26");
  svg.setAttribute("height", "14");
  svg.setAttribute("viewBox", "0 0 26 14");
  svg.setAttribute("aria-hidden", "true");
  const line = document.createElementNS(SVG_NS, "path");
  line.setAttribute("d", "M1,7H25");
  line.setAttribute("class", "cw-group-swatch-line");
  line.setAttribute("stroke", e.style.colour);
  const mark = document.createElementNS(SVG_NS, "path");
  mark.setAttribute("d", markerSvgPath(e.style.marker, 13, 7, 4.2));
  mark.setAttribute("class", "cw-group-swatch-mark");
  mark.setAttribute("fill", e.excluded ? "var(--cw-bg)" : e.style.colour);
  mark.setAttribute("stroke", e.style.colour);
  svg.append(line, mark);
  return svg;
}

export class GroupLegend {
  readonly el: HTMLDivElement;
  private readonly cb: LegendCallbacks;
  private key = "";

  constructor(cb: LegendCallbacks) {
    this.cb = cb;
    this.el = el("div", { class: "cw-group-legend", role: "group", "aria-label": "Groups" });
    this.el.hidden = true;
    // Arrow keys move between the entries' main buttons (Tab still reaches every button).
    this.el.addEventListener("keydown", (ev) => {
      const t = ev.target as HTMLElement | null;
      if (!t?.classList.contains("cw-group-select")) return;
      const step = ev.key === "ArrowRight" || ev.key === "ArrowDown" ? 1 : ev.key === "ArrowLeft" || ev.key === "ArrowUp" ? -1 : 0;
      if (step === 0) return;
      const all = [...this.el.querySelectorAll<HTMLButtonElement>("button.cw-group-select")];
      const i = all.indexOf(t as HTMLButtonElement);
      const next = all[(i + step + all.length) % all.length];
      if (next) {
        ev.preventDefault();
        ev.stopPropagation();
        next.focus();
      }
    });
  }

  /** Redraw from the entries (null: no groups, the legend is hidden). */
  show(entries: LegendEntry[] | null): void {
    const key = JSON.stringify(entries);
    if (key === this.key) return;
    this.key = key;
    this.el.hidden = entries === null;
    if (entries === null) {
      this.el.replaceChildren();
      return;
    }
    // Keep keyboard focus on the same control of the same group across the redraw.
    const active = document.activeElement as HTMLElement | null;
    const focusGroup = active && this.el.contains(active) ? active.closest<HTMLElement>("[data-group]")?.dataset["group"] : undefined;
    const focusKind = active?.dataset["cwAction"];
    this.el.replaceChildren(
      el("span", { class: "cw-group-legend-title", "aria-hidden": "true" }, "groups"),
      ...entries.map((e) => this.entry(e)),
    );
    if (focusGroup !== undefined && focusKind !== undefined) {
      for (const b of this.el.querySelectorAll<HTMLButtonElement>("button[data-cw-action]")) {
        if (b.dataset["cwAction"] === focusKind && b.closest<HTMLElement>("[data-group]")?.dataset["group"] === focusGroup) {
          b.focus({ preventScroll: true });
        }
      }
    }
  }

  private entry(e: LegendEntry): HTMLElement {
    const cls = ["cw-group-entry", e.selected ? "cw-selected" : "", e.hidden ? "cw-hidden" : "", e.excluded ? "cw-excluded" : ""];
    const item = el("div", {
      class: cls.filter(Boolean).join(" "),
      "data-group": e.label,
      "data-colour": e.style.colour,
      "data-marker": e.style.marker,
    });
    const select = el("button", {
      type: "button",
      class: "cw-group-select",
      "data-cw-action": "select",
      "data-lm-suppress-shortcuts": "true",
      "aria-label": e.selectName,
      "aria-pressed": String(e.selected),
      title: e.selected ? `${e.label}: the handles and the table act on this group` : `Act on ${e.label}`,
    });
    select.append(swatch(e), el("span", { class: "cw-group-label" }, e.label));
    if (e.note) select.append(el("span", { class: "cw-group-note", "aria-hidden": "true" }, e.note));
    select.addEventListener("click", () => {
      if (!e.selected) this.cb.onSelect(e.label);
    });
    const hide = el(
      "button",
      {
        type: "button",
        class: "cw-group-toggle cw-group-hide",
        "data-cw-action": "hide",
        "data-lm-suppress-shortcuts": "true",
        "aria-label": e.hideName,
        "aria-pressed": String(e.hidden),
        title: e.hidden ? `Draw ${e.label} again` : `Stop drawing ${e.label} (it is still fitted)`,
      },
      e.hidden ? "show" : "hide",
    );
    hide.addEventListener("click", () => this.cb.onHide(e.label, !e.hidden));
    const exclude = el(
      "button",
      {
        type: "button",
        class: "cw-group-toggle cw-group-exclude",
        "data-cw-action": "exclude",
        "data-lm-suppress-shortcuts": "true",
        "aria-label": e.excludeName,
        "aria-pressed": String(e.excluded),
        title: e.excluded ? `Fit ${e.label} again` : `Leave ${e.label} out of the fit (still drawn, faded)`,
      },
      e.excluded ? "fit it" : "leave out",
    );
    exclude.addEventListener("click", () => this.cb.onExclude(e.label, !e.excluded));
    item.append(select, hide, exclude);
    return item;
  }
}
