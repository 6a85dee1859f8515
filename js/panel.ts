// The parameter panel: one row per parameter with its value, fixed toggle, bounds and unit, and
// after a fit its estimate, standard error, confidence interval and flags. Edits are checked
// here (validate.ts) and shown inline when invalid; only valid settings reach the widget.

import { el } from "./dom";
import type { GroupStyle } from "./groups";
import { defaultRecord, type Scope } from "./params";
import type { FittedJson, ModelJson, ParamInfo, ParamRecord } from "./state";
import { type FieldKind, checkSetting, formatNumber, parseField } from "./validate";

export interface PanelCallbacks {
  onCommit(name: string, setting: ParamRecord): void;
  /** A valid value being typed (not yet committed), for live preview; null when abandoned. */
  onTyping?(name: string, value: number | null): void;
  /** The shared / per-group switch of a parameter (widgets made with by=). */
  onScope?(name: string, scope: Scope): void;
}

/** What the panel shows of the groups (by=): every group's value of every parameter. */
export interface GroupsView {
  selected: string;
  rows: {
    name: string;
    shared: boolean;
    fixed: boolean;
    cells: { label: string; value: number; selected: boolean; style: GroupStyle }[];
  }[];
}

// Above this many groups a row's per-group values fold into a disclosure.
const OPEN_GROUPS = 6;

export interface DerivedView {
  name: string;
  value: number;
  unit: string;
  description: string;
}

interface Row {
  info: ParamInfo;
  tr: HTMLTableRowElement;
  value: HTMLInputElement;
  fixed: HTMLInputElement;
  lower: HTMLInputElement;
  upper: HTMLInputElement;
  est: HTMLTableCellElement;
  se: HTMLTableCellElement;
  ci: HTMLTableCellElement;
  flag: HTMLTableCellElement;
  scope: HTMLInputElement;
  groupValues: HTMLElement;
  msg: HTMLElement;
  setting: ParamRecord;
  dirty: Set<FieldKind>;
}

// Words for the flag codes a fit may report; an unknown code is shown as it comes.
const FLAG_WORDS: Record<string, string> = {
  at_lower: "at lower bound",
  at_upper: "at upper bound",
  at_bound: "at a bound",
  not_identified: "not identified",
  fixed: "fixed",
};

let uid = 0;


function sameSetting(a: ParamRecord, b: ParamRecord): boolean {
  return a.value === b.value && a.lower === b.lower && a.upper === b.upper && a.fixed === b.fixed;
}

export class ParamPanel {
  readonly el: HTMLDivElement;
  private readonly cb: PanelCallbacks;
  private readonly table: HTMLTableElement;
  private readonly tbody: HTMLTableSectionElement;
  private readonly ciHeader: HTMLTableCellElement;
  private readonly valueHeader: HTMLTableCellElement;
  private readonly derivedEl: HTMLDivElement;
  private rows = new Map<string, Row>();
  private readonly id = ++uid;

  constructor(parent: HTMLElement, cb: PanelCallbacks) {
    this.cb = cb;
    this.el = el("div", { class: "cw-panel" });
    parent.appendChild(this.el);
    this.table = el("table", { class: "cw-params" });
    const caption = el("caption", { class: "cw-sr-only" }, "Parameters");
    this.table.appendChild(caption);
    const head = el("thead");
    const hr = el("tr");
    const headers: [string, string][] = [
      ["Parameter", ""],
      ["Value", ""],
      ["Fixed", ""],
      ["Lower", ""],
      ["Upper", ""],
      ["Unit", ""],
      ["Groups", "cw-groupcol"],
      ["Estimate", "cw-fitcol"],
      ["Std. error", "cw-fitcol"],
      ["CI", "cw-fitcol"],
      ["", "cw-fitcol"],
    ];
    this.ciHeader = el("th");
    this.valueHeader = el("th");
    for (const [label, cls] of headers) {
      const th = label === "CI" ? this.ciHeader : label === "Value" ? this.valueHeader : el("th");
      th.setAttribute("scope", "col");
      th.textContent = label;
      if (cls) th.className = cls;
      hr.appendChild(th);
    }
    head.appendChild(hr);
    this.table.appendChild(head);
    this.tbody = el("tbody");
    this.table.appendChild(this.tbody);
    this.el.appendChild(this.table);
    this.derivedEl = el("div", { class: "cw-derived" });
    this.el.appendChild(this.derivedEl);
  }

  destroy(): void {
    this.el.remove();
  }

  /** Rebuild the rows for a (new) model. */
  setModel(model: ModelJson, settings: Readonly<Record<string, ParamRecord>>): void {
    this.tbody.replaceChildren();
    this.rows.clear();
    for (const info of model.params) {
      const s = settings[info.name] ?? defaultRecord(info);
      this.rows.set(info.name, this.buildRow(info, s));
    }
  }

  private buildRow(info: ParamInfo, setting: ParamRecord): Row {
    const base = `cw-${this.id}-${info.name}`;
    const tr = el("tr", { "data-param": info.name });
    const nameCell = el("th", { scope: "row", id: `${base}-name`, class: "cw-pname" }, info.name);
    if (info.description) nameCell.title = info.description;
    tr.appendChild(nameCell);
    const msgId = `${base}-msg`;
    const text = (cls: string, label: string | null): HTMLInputElement => {
      const input = el("input", {
        type: "text",
        inputmode: "decimal",
        autocomplete: "off",
        spellcheck: "false",
        class: cls,
        "data-lm-suppress-shortcuts": "true",
      });
      // The value input's accessible name is exactly the parameter's name.
      if (label === null) input.setAttribute("aria-labelledby", `${base}-name`);
      else input.setAttribute("aria-label", label);
      return input;
    };
    const value = text("cw-value", null);
    const fixed = el("input", {
      type: "checkbox",
      class: "cw-fixed",
      "aria-label": `Fix ${info.name}`,
      "data-lm-suppress-shortcuts": "true",
    });
    const lower = text("cw-bound cw-lower", `${info.name} lower bound`);
    const upper = text("cw-bound cw-upper", `${info.name} upper bound`);
    for (const input of [value, lower, upper]) {
      const td = el("td");
      if (input === value) {
        td.appendChild(value);
        tr.appendChild(td);
        const tdFixed = el("td", { class: "cw-center" });
        tdFixed.appendChild(fixed);
        tr.appendChild(tdFixed);
      } else {
        td.appendChild(input);
        tr.appendChild(td);
      }
    }
    tr.appendChild(el("td", { class: "cw-unit" }, info.unit));
    // Groups (by=): the share switch and every group's value; the column hides without groups.
    const groupCell = el("td", { class: "cw-groupcol" });
    const scopeId = `${base}-scope`;
    const scope = el("input", {
      id: scopeId,
      type: "checkbox",
      class: "cw-scope",
      "aria-label": `Share ${info.name} across groups`,
      "data-lm-suppress-shortcuts": "true",
      title: "Checked: one value for every group. Unchecked: each group gets its own value.",
    });
    const scopeLabel = el("label", { for: scopeId, class: "cw-scope-label", "aria-hidden": "true" }, "shared");
    const scopeWrap = el("span", { class: "cw-scope-switch" });
    scopeWrap.append(scope, scopeLabel);
    const groupValues = el("div", { class: "cw-group-values" });
    groupCell.append(scopeWrap, groupValues);
    tr.appendChild(groupCell);
    const est = el("td", { class: "cw-fitcol cw-num" });
    const se = el("td", { class: "cw-fitcol cw-num" });
    const ci = el("td", { class: "cw-fitcol cw-num" });
    const flag = el("td", { class: "cw-fitcol cw-flag" });
    tr.append(est, se, ci, flag);
    this.tbody.appendChild(tr);
    const msgRow = el("tr", { class: "cw-msgrow" });
    const msgCell = el("td", { colspan: "11" });
    const msg = el("div", { id: msgId, class: "cw-msg", "aria-live": "polite" });
    msgCell.appendChild(msg);
    msgRow.appendChild(msgCell);
    this.tbody.appendChild(msgRow);

    const row: Row = { info, tr, value, fixed, lower, upper, est, se, ci, flag, scope, groupValues, msg, setting, dirty: new Set() };
    this.showSetting(row, setting, true);
    const fields: [HTMLInputElement, FieldKind][] = [
      [value, "value"],
      [lower, "lower"],
      [upper, "upper"],
    ];
    for (const [input, kind] of fields) {
      input.setAttribute("aria-describedby", msgId);
      input.addEventListener("input", () => {
        row.dirty.add(kind);
        if (kind !== "value" || !this.cb.onTyping) return;
        const parsed = parseField(input.value, "value");
        const ok = parsed.ok && checkSetting(row.info, { ...row.setting, value: parsed.value as number }) === null;
        this.cb.onTyping(row.info.name, ok && parsed.ok ? (parsed.value as number) : null);
      });
      // JupyterLab does not fire `change` on Enter in an output's input, so Enter commits too.
      input.addEventListener("keydown", (e) => {
        if (e.key === "Enter") {
          e.preventDefault();
          this.commitField(row, kind);
        } else if (e.key === "Escape") {
          e.preventDefault();
          row.dirty.delete(kind);
          this.clearMessage(row);
          this.showSetting(row, row.setting, true);
          if (kind === "value") this.cb.onTyping?.(row.info.name, null);
        }
      });
      input.addEventListener("change", () => this.commitField(row, kind));
    }
    scope.addEventListener("change", () => {
      // Python decides (set_scope) and sends the records back; show its answer, not the click.
      const want: Scope = scope.checked ? "shared" : "per_group";
      scope.checked = row.setting.scope === "shared";
      this.cb.onScope?.(row.info.name, want);
    });
    fixed.addEventListener("change", () => {
      const next = { ...row.setting, fixed: fixed.checked };
      this.apply(row, next);
    });
    return row;
  }

  private commitField(row: Row, kind: FieldKind): void {
    const input = kind === "value" ? row.value : kind === "lower" ? row.lower : row.upper;
    const parsed = parseField(input.value, kind);
    if (!parsed.ok) {
      this.showMessage(row, input, `${row.info.name}: ${parsed.message}; not applied.`);
      return;
    }
    const next: ParamRecord = { ...row.setting };
    if (kind === "value") next.value = parsed.value as number;
    else next[kind] = parsed.value;
    const problem = checkSetting(row.info, next);
    if (problem !== null) {
      this.showMessage(row, input, `${row.info.name}: ${problem}; not applied.`);
      return;
    }
    row.dirty.delete(kind);
    this.apply(row, next);
  }

  private apply(row: Row, next: ParamRecord): void {
    this.clearMessage(row);
    if (sameSetting(next, row.setting)) {
      this.showSetting(row, next, false);
      return;
    }
    row.setting = next;
    this.showSetting(row, next, false);
    this.cb.onCommit(row.info.name, next);
  }

  private showMessage(row: Row, input: HTMLInputElement, text: string): void {
    for (const i of [row.value, row.lower, row.upper]) i.removeAttribute("aria-invalid");
    input.setAttribute("aria-invalid", "true");
    row.msg.textContent = text;
    row.tr.classList.add("cw-invalid");
  }

  private clearMessage(row: Row): void {
    for (const i of [row.value, row.lower, row.upper]) i.removeAttribute("aria-invalid");
    row.msg.textContent = "";
    row.tr.classList.remove("cw-invalid");
  }

  private showSetting(row: Row, s: ParamRecord, force: boolean): void {
    const put = (input: HTMLInputElement, kind: FieldKind, v: number | null): void => {
      // Never overwrite what the person is typing.
      if (!force && row.dirty.has(kind)) return;
      input.value = v === null ? "" : formatNumber(v);
    };
    put(row.value, "value", s.value);
    put(row.lower, "lower", s.lower);
    put(row.upper, "upper", s.upper);
    row.fixed.checked = s.fixed;
    row.tr.classList.toggle("cw-isfixed", s.fixed);
    row.scope.checked = s.scope === "shared";
    row.tr.dataset["scope"] = s.scope;
  }

  /** New synced settings (from Python or our own commit coming back). */
  setSettings(settings: Readonly<Record<string, ParamRecord>>): void {
    for (const [name, row] of this.rows) {
      const s = settings[name];
      if (!s) continue;
      row.setting = { ...s };
      this.showSetting(row, row.setting, false);
    }
  }

  /** Live values during a drag (not yet committed). */
  setPreview(values: Readonly<Record<string, number>>): void {
    for (const [name, row] of this.rows) {
      const v = values[name];
      if (typeof v === "number" && !row.dirty.has("value") && document.activeElement !== row.value) {
        row.value.value = formatNumber(v);
      }
    }
  }

  /** Every group's values (by=), or null for one curve (the Groups column hides). */
  setGroups(view: GroupsView | null): void {
    this.table.classList.toggle("cw-has-groups", view !== null);
    this.valueHeader.textContent = view === null ? "Value" : `Value (${view.selected})`;
    this.valueHeader.title = view === null ? "" : `The values of the selected group, ${view.selected}; shared values are every group's`;
    for (const [name, row] of this.rows) {
      const r = view?.rows.find((q) => q.name === name);
      if (!r) {
        row.groupValues.replaceChildren();
        continue;
      }
      if (r.fixed || r.shared) {
        const v = r.cells[0]?.value;
        row.groupValues.replaceChildren(
          el("span", { class: "cw-group-same" }, `${r.fixed ? "fixed, " : ""}all groups${v === undefined ? "" : ` ${formatNumber(v, 4)}`}`),
        );
        continue;
      }
      const list = el("ul", { class: "cw-group-list", "aria-label": `${name} by group` });
      for (const c of r.cells) {
        const li = el("li", { "data-group": c.label, "data-value": String(c.value) });
        if (c.selected) li.setAttribute("aria-current", "true");
        const dot = el("span", { class: "cw-group-dot", "aria-hidden": "true" });
        dot.style.background = c.style.colour;
        li.append(dot, el("span", { class: "cw-group-name" }, c.label), el("span", { class: "cw-num" }, formatNumber(c.value, 4)));
        list.appendChild(li);
      }
      if (r.cells.length > OPEN_GROUPS) {
        const wasOpen = row.groupValues.querySelector("details")?.open === true;
        const details = el("details");
        details.open = wasOpen;
        const sel = r.cells.find((c) => c.selected);
        details.append(el("summary", {}, `${r.cells.length} values${sel ? ` (${sel.label}: ${formatNumber(sel.value, 4)})` : ""}`), list);
        row.groupValues.replaceChildren(details);
      } else {
        row.groupValues.replaceChildren(list);
      }
    }
  }

  setFitted(fitted: FittedJson | null): void {
    this.table.classList.toggle("cw-has-fit", fitted !== null);
    const level = fitted?.ci_level;
    this.ciHeader.textContent = typeof level === "number" ? `${Math.round(level * 100)}% CI` : "CI";
    for (const [name, row] of this.rows) {
      if (fitted === null) {
        row.est.textContent = row.se.textContent = row.ci.textContent = row.flag.textContent = "";
        row.tr.classList.remove("cw-flagged");
        continue;
      }
      row.est.textContent = formatNumber(fitted.values[name], 5);
      const se = fitted.stderr[name];
      row.se.textContent = typeof se === "number" ? formatNumber(se, 3) : "–";
      const lo = fitted.ci_low[name];
      const hi = fitted.ci_high[name];
      row.ci.textContent =
        typeof lo === "number" && typeof hi === "number"
          ? `${formatNumber(lo, 4)} to ${formatNumber(hi, 4)}`
          : "–";
      const flags = (fitted.flags[name] ?? []).map((f) => FLAG_WORDS[f] ?? f.replace(/_/g, " "));
      row.flag.textContent = flags.join(", ");
      row.tr.classList.toggle("cw-flagged", flags.length > 0 && !(flags.length === 1 && flags[0] === "fixed"));
    }
  }

  setDerived(items: DerivedView[]): void {
    this.derivedEl.replaceChildren();
    if (items.length === 0) return;
    const dl = el("dl");
    for (const d of items) {
      const dt = el("dt", {}, d.name);
      if (d.description) dt.title = d.description;
      const dd = el("dd", {}, `${formatNumber(d.value, 5)}${d.unit ? ` ${d.unit}` : ""}`);
      dl.append(dt, dd);
    }
    this.derivedEl.append(el("span", { class: "cw-derived-title" }, "At current values:"), dl);
  }
}
