// UI-only state: what the view holds for itself and never syncs to Python (the preview values
// during a drag, the zoom, pins of generic handles, box-select mode, edits in progress).

import type { Point } from "./handles";

export interface UIState {
  /** Parameter values drawn now: the synced values, or a drag's preview before it is committed. */
  preview: Record<string, number>;
  /** Name of the handle (or "pin:<i>") being dragged, or null. */
  dragging: string | null;
  /** Points a model without declared handles is pinned through (data coordinates). */
  pins: Point[];
  /** Drag a box to exclude or re-include points (also Shift+drag). */
  boxMode: boolean;
  /** A keyboard nudge waiting to be committed. */
  nudgeTimer: number | null;
  /** Solver feedback for the last drag, shown beside the plot ("stopped at a bound" ...). */
  dragNote: string;
}

export function createUIState(): UIState {
  return { preview: {}, dragging: null, pins: [], boxMode: false, nudgeTimer: null, dragNote: "" };
}
