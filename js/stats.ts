// Small descriptive statistics for drawing replicates (points sharing an x): mean and spread.
// Pure: no DOM, no widget state.

export interface ReplicateGroup {
  x: number;
  /** Indices into the input arrays, in increasing order. */
  indices: number[];
  n: number;
  mean: number;
  /** Sample standard deviation (n - 1 denominator); NaN when n < 2. */
  sd: number;
}

/**
 * Group the points by exactly equal x (replicates of one concentration or time) and give each
 * group's mean and sample standard deviation. Points with `skip[i]` true or a non-finite x or y
 * are left out. Groups come sorted by x.
 */
export function groupReplicates(
  xs: ArrayLike<number>,
  ys: ArrayLike<number>,
  skip?: ArrayLike<boolean>,
): ReplicateGroup[] {
  if (xs.length !== ys.length) {
    throw new RangeError(`xs and ys must have the same length, got ${xs.length} and ${ys.length}.`);
  }
  const byX = new Map<number, number[]>();
  for (let i = 0; i < xs.length; i++) {
    if (skip?.[i]) continue;
    const x = xs[i]!;
    if (!Number.isFinite(x) || !Number.isFinite(ys[i]!)) continue;
    const key = x === 0 ? 0 : x; // -0 and +0 are one concentration
    let list = byX.get(key);
    if (list === undefined) {
      list = [];
      byX.set(key, list);
    }
    list.push(i);
  }
  const groups: ReplicateGroup[] = [];
  for (const [x, indices] of byX) {
    const n = indices.length;
    let sum = 0;
    for (const i of indices) sum += ys[i]!;
    const mean = sum / n;
    // Two passes (mean first, then squared deviations) avoid the cancellation of sum-of-squares.
    let ss = 0;
    for (const i of indices) {
      const d = ys[i]! - mean;
      ss += d * d;
    }
    groups.push({ x, indices, n, mean, sd: n > 1 ? Math.sqrt(ss / (n - 1)) : NaN });
  }
  groups.sort((a, b) => a.x - b.x);
  return groups;
}

/** Whether any x value occurs more than once among the kept points (replicates present). */
export function hasReplicates(groups: readonly ReplicateGroup[]): boolean {
  return groups.some((g) => g.n > 1);
}
