/** Output messages of contract v1: what downstream consumers read. */
import { z } from 'zod';
import { ALERT_LEVELS, ALERT_STATES, METRICS, TENORS, UNPRICED_REASONS } from './constants.ts';
import { currencyField, finiteNumber, idField, nameField, tsField } from './fields.ts';

const countField = z.number().int('must be an integer >= 0').gte(0, 'must be an integer >= 0');

export const nodeSchema = z.object({
  desk: nameField.optional(),
  book: nameField.optional(),
  underlying: nameField.optional(),
  tenor: z.enum(TENORS).optional(),
});
export type NodeDims = z.infer<typeof nodeSchema>;

export const exposureSchema = z.object({
  type: z.literal('exposure'),
  nodeKey: z.string().min(1, 'must not be empty'),
  node: nodeSchema,
  currency: currencyField,
  asOf: tsField,
  pv: finiteNumber,
  pnl: finiteNumber,
  /** null on nodes that do not fix one underlying */
  delta: finiteNumber.nullable(),
  cashDelta: finiteNumber,
  /** null on nodes that do not fix one underlying */
  gamma: finiteNumber.nullable(),
  cashGamma: finiteNumber,
  vega: finiteNumber,
  theta: finiteNumber,
  rho: finiteNumber,
  positions: countField,
  unpriced: z.partialRecord(z.enum(UNPRICED_REASONS), countField),
  stale: z.boolean(),
});

export const alertSchema = z.object({
  type: z.literal('alert'),
  alertId: z.string().min(1, 'must not be empty'),
  limitId: idField,
  nodeKey: z.string().min(1, 'must not be empty'),
  metric: z.enum(METRICS),
  value: finiteNumber,
  bound: finiteNumber,
  utilization: finiteNumber,
  severity: z.enum(ALERT_LEVELS),
  previous: z.enum(ALERT_LEVELS),
  state: z.enum(ALERT_STATES),
  ts: tsField,
});

export const staleFeedSchema = z.object({
  type: z.literal('stale-feed'),
  underlying: nameField,
  state: z.enum(['raised', 'cleared']),
  lastTick: tsField,
  ts: tsField,
});

export const rejectedSchema = z.object({
  type: z.literal('rejected'),
  reason: z.string().min(1, 'must not be empty'),
  source: z.string(),
  raw: z.string(),
  ts: tsField,
});

export const outputSchema = z.discriminatedUnion('type', [
  exposureSchema,
  alertSchema,
  staleFeedSchema,
  rejectedSchema,
]);

export type ExposureMsg = z.infer<typeof exposureSchema>;
export type AlertMsg = z.infer<typeof alertSchema>;
export type StaleFeedMsg = z.infer<typeof staleFeedSchema>;
export type RejectedMsg = z.infer<typeof rejectedSchema>;
export type OutputMsg = z.infer<typeof outputSchema>;
