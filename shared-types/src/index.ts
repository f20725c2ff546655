/**
 * @keelson/shared-types: the executable form of message contract v1 (../CONTRACT.md).
 * zod schemas with inferred types, decoding with human-readable reasons, and the topic, key and
 * node-key conventions.
 */
export {
  METRICS,
  UNDERLYING_ONLY_METRICS,
  TENORS,
  UNPRICED_REASONS,
  ALERT_LEVELS,
  ALERT_STATES,
  UNDERLYING_KINDS,
  OPTION_RIGHTS,
  OPTION_PAYOFFS,
  INPUT_TYPES,
  MS_PER_DAY,
  tenorBucket,
} from './constants.ts';
export type {
  Metric,
  Tenor,
  UnpricedReason,
  AlertLevel,
  AlertState,
  UnderlyingKind,
  OptionRight,
  OptionPayoff,
  InputType,
} from './constants.ts';

export {
  underlyingSchema,
  spotSchema,
  volSurfaceSchema,
  curveSchema,
  tradeSchema,
  limitSchema,
  limitRemoveSchema,
  inputSchema,
  INPUT_SCHEMAS,
} from './inputs.ts';
export type {
  UnderlyingMsg,
  Dividend,
  SpotMsg,
  VolSurfaceMsg,
  CurveMsg,
  OptionInstrument,
  LinearInstrument,
  Instrument,
  TradeBookingMsg,
  TradeCancelMsg,
  TradeMsg,
  LimitScope,
  LimitMsg,
  LimitRemoveMsg,
  InputMsg,
} from './inputs.ts';

export {
  nodeSchema,
  exposureSchema,
  alertSchema,
  staleFeedSchema,
  rejectedSchema,
  outputSchema,
} from './outputs.ts';
export type { NodeDims, ExposureMsg, AlertMsg, StaleFeedMsg, RejectedMsg, OutputMsg } from './outputs.ts';

export { decodeInput, scanSpot, scannedSpot, validateInput, validateOutput } from './decode.ts';
export type { DecodeResult, OutputCheck, SpotScan } from './decode.ts';
export { formatIssues, formatPath } from './reasons.ts';
export { parseTs, formatTs, isContractTs, contractTsMs, contractTsMsAt } from './time.ts';
export {
  TOPICS,
  INPUT_TOPICS,
  DEFAULT_TOPIC_PREFIX,
  inputTopic,
  inputKey,
  nodeKey,
  parseNodeKey,
} from './keys.ts';
export type { TopicName, NodeLike } from './keys.ts';
