export { ManualClock, WallClock } from './clock.ts';
export type { Clock } from './clock.ts';
export { RiskEngine } from './engine.ts';
export type { EngineDrain, EngineObserver, EngineOptions, EngineStats, Outcome } from './engine.ts';
export { LimitMonitor } from './limits.ts';
export type { LimitView, MetricValues } from './limits.ts';
export { boundFor, nextLevel, transitionState, utilization } from './levels.ts';
export { exposureFromPartials } from './partials.ts';
export type { NodePartial } from './partials.ts';
