/** @keelson/sim: the seeded market and trade-flow simulator of the invented demo scenario. */
export { MarketSim } from './sim.ts';
export type { SimOptions, StepResult, SimUniverse } from './sim.ts';
export type { SurfaceMode } from './market.ts';
export { DESKS, CURRENCIES, REPORTING_CURRENCY, CORE_UNDERLYINGS } from './universe.ts';
