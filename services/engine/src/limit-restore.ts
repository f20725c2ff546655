// Alert continuity across restarts: a rebuilt limit book starts from what risk control was last
// told (the latest alert per limit on the alerts topic), not from what a replay happens to give.
// A replay coalesces inputs and, on the wall clock, values at another time, so its levels and
// episode counts can differ from the published ones; restoring them makes the first live change continue
// the published episode (an `escalated` or `cleared` with the same alertId), and a level that did
// not change publishes nothing.
//
// Kept beside LimitMonitor rather than in it so as to touch nothing else there: it reaches the
// monitor's per-limit state, which is private to the class in TypeScript only.
import type { AlertLevel, AlertMsg } from '@keelson/shared-types';
import type { RiskEngine } from './engine.ts';
import { LimitMonitor } from './limits.ts';

interface SeedableState {
  level: AlertLevel;
  episodes: number;
  lastAlert: AlertMsg | undefined;
}

/** The episode number of an alertId `${limitId}#${n}`; undefined when it is not of that form. */
export function episodeOf(alert: Pick<AlertMsg, 'alertId' | 'limitId'>): number | undefined {
  const prefix = `${alert.limitId}#`;
  if (!alert.alertId.startsWith(prefix)) return undefined;
  const n = Number(alert.alertId.slice(prefix.length));
  return Number.isInteger(n) && n >= 1 ? n : undefined;
}

/**
 * Sets each known limit's level and episode from its latest published alert; returns the limitIds
 * restored. A limit with no alert keeps its state; an alert for a limit not in the book is ignored
 * (it was removed, and its removal cleared it). Call after the rebuild, before going live.
 */
export function restoreLimitLevels(target: LimitMonitor | RiskEngine, latest: Iterable<AlertMsg>): string[] {
  const monitor =
    target instanceof LimitMonitor ? target : (target as unknown as { limitBook: LimitMonitor }).limitBook;
  const states = (monitor as unknown as { limits: Map<string, SeedableState> }).limits;
  const restored: string[] = [];
  for (const a of latest) {
    const st = states.get(a.limitId);
    const n = episodeOf(a);
    if (!st || n === undefined) continue;
    st.level = a.state === 'cleared' ? 'ok' : a.severity;
    st.episodes = n;
    st.lastAlert = a;
    restored.push(a.limitId);
  }
  return restored;
}
