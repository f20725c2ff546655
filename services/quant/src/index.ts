// @keelson/quant: pure pricing functions over numbers. No I/O, no clock, no logging.
export type { Right, Payoff, OptionInputs, Greeks, OptionBatch, GreeksBatch } from './types.ts';
export { RIGHT_CODE, PAYOFF_CODE } from './types.ts';
export { normCdf, normPdf } from './normal.ts';
export { MS_PER_YEAR, yearFraction } from './time.ts';
export { priceOption, validateOptionInputs } from './bsm.ts';
export { impliedVol, impliedVolBounds, ImpliedVolError } from './implied.ts';
export type { ImpliedVolInputs } from './implied.ts';
export type { ZeroCurve } from './curve.ts';
export { zeroRate, discountFactor } from './curve.ts';
export type { VolGrid } from './surface.ts';
export { surfaceVol } from './surface.ts';
export { allocOptionBatch, allocGreeksBatch, priceBatch } from './batch.ts';
