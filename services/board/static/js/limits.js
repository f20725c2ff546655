// Where each limit stands, for the bars. The engine's own view of a limit (bounds, warning level,
// hysteresis, level) is authoritative when the stream carries it; until then a limit is known from
// its alerts (the bound on the side that fired, its level) and its node's exposures move the value.

const DEFAULT_WARN_AT = 0.8; // the contract's default warnAt

export function utilizationOf(value, max, min) {
  // The contract's rule: value / max for value >= 0 with a max, value / min for value < 0 with a min.
  if (value >= 0 && typeof max === 'number' && max > 0) return value / max;
  if (value < 0 && typeof min === 'number' && min < 0) return value / min;
  return 0;
}

export class LimitBook {
  constructor() {
    /** @type {Map<string, any>} limitId -> view */
    this.views = new Map();
    /** nodeKey -> Set of limitIds watching it */
    this.byNode = new Map();
    this.version = 0;
  }

  #index(view) {
    let set = this.byNode.get(view.nodeKey);
    if (!set) this.byNode.set(view.nodeKey, (set = new Set()));
    set.add(view.limitId);
  }

  /** An authoritative view from the engine. */
  setView(v) {
    const old = this.views.get(v.limitId);
    if (old && old.nodeKey !== v.nodeKey) this.byNode.get(old.nodeKey)?.delete(v.limitId);
    const view = { ...v, assumed: false, lastAlert: old?.lastAlert ?? null };
    this.views.set(v.limitId, view);
    this.#index(view);
    this.version++;
  }

  /** An alert: creates the view if this is the first word of the limit, and sets its level. */
  onAlert(a) {
    let view = this.views.get(a.limitId);
    if (!view) {
      view = {
        limitId: a.limitId,
        nodeKey: a.nodeKey,
        metric: a.metric,
        warnAt: DEFAULT_WARN_AT,
        hysteresis: 0.05,
        value: a.value,
        utilization: a.utilization,
        level: a.severity,
        // Bounds and warning level inferred from alerts only: the bar says so.
        assumed: true,
      };
      this.views.set(a.limitId, view);
      this.#index(view);
    }
    if (view.assumed) {
      if (a.bound > 0) view.max = a.bound;
      else if (a.bound < 0) view.min = a.bound;
    }
    view.value = a.value;
    view.utilization = a.utilization;
    view.level = a.severity;
    view.lastAlert = a;
    this.version++;
  }

  /** A node's new exposure moves the value of every limit watching it (the level moves only by alert). */
  onExposure(e) {
    const ids = this.byNode.get(e.nodeKey);
    if (!ids) return;
    for (const id of ids) {
      const view = this.views.get(id);
      const value = e[view.metric];
      if (typeof value !== 'number' || value === view.value) continue;
      view.value = value;
      view.utilization = utilizationOf(value, view.max, view.min);
      this.version++;
    }
  }

  remove(limitId) {
    const v = this.views.get(limitId);
    if (!v) return;
    this.views.delete(limitId);
    this.byNode.get(v.nodeKey)?.delete(limitId);
    this.version++;
  }

  clear() {
    this.views.clear();
    this.byNode.clear();
    this.version++;
  }

  /** Highest utilization first; ties by limitId so the list does not shuffle. */
  ranked() {
    return [...this.views.values()].sort(
      (a, b) => b.utilization - a.utilization || (a.limitId < b.limitId ? -1 : a.limitId > b.limitId ? 1 : 0),
    );
  }
}
