/**
 * Input messages of contract v1 (/work/shared/contract-v1.md, copied as ../CONTRACT.md).
 *
 * Decisions the contract leaves open (also listed in ../README.md):
 * - `dividendYield` and `dividends` describe equities only; on a `future` or `fx` underlying a
 *   non-zero yield or a dividend is contradictory and rejected. Dividends may come in any order;
 *   the parsed message holds them sorted by exDate (two on one date are both kept).
 * - FX pairs: base and quote must differ.
 * - Trade `price` must be finite and >= 0 (premiums and prices in this system are never negative,
 *   spots being > 0); `quantity` finite, zero allowed (a position closed out by an amend).
 * - `cashAmount` is accepted only with payoff `cash-digital`; `exercise`, when sent, must be
 *   `european` (the only style in v1): an American option is rejected, never valued as European.
 * - A limit's `scope` is required; `{}` (the whole firm) must be sent explicitly.
 * - A limit's `hysteresis` must be below its `warnAt`, else a warning could never clear.
 * - Curve zero rates and dividend yields are decimals within [-1, 1].
 */
import { z } from 'zod';
import {
  INPUT_TYPES,
  METRICS,
  OPTION_PAYOFFS,
  OPTION_RIGHTS,
  TENORS,
  UNDERLYING_KINDS,
  UNDERLYING_ONLY_METRICS,
} from './constants.ts';
import {
  checkStrictlyIncreasing,
  currencyField,
  finiteNumber,
  idField,
  nameField,
  positiveNumber,
  rateField,
  tsField,
  versionField,
  whenClean,
} from './fields.ts';
import { parseTs } from './time.ts';

// ---------------------------------------------------------------- underlying (reference data)

const dividendSchema = z.object({
  exDate: tsField,
  amount: positiveNumber,
});

export const underlyingSchema = z
  .object({
    type: z.literal('underlying'),
    underlying: nameField,
    kind: z.enum(UNDERLYING_KINDS),
    currency: currencyField,
    dividendYield: rateField.default(0),
    dividends: z.array(dividendSchema).default([]),
    ts: tsField,
  })
  .superRefine((m, ctx) => {
    if (m.kind === 'fx') {
      if (!/^[A-Z]{6}$/.test(m.underlying)) {
        ctx.addIssue({
          code: 'custom',
          path: ['underlying'],
          message: 'must be a six-letter upper-case pair BASEQUOTE for kind fx, like EURUSD',
        });
        return;
      }
      const base = m.underlying.slice(0, 3);
      const quote = m.underlying.slice(3);
      if (base === quote) {
        ctx.addIssue({
          code: 'custom',
          path: ['underlying'],
          message: 'must name two different currencies for kind fx',
        });
      }
      if (m.currency !== quote) {
        ctx.addIssue({
          code: 'custom',
          path: ['currency'],
          message: `must equal the quote currency ${quote} of pair ${m.underlying}`,
        });
      }
    }
    if (m.kind !== 'equity') {
      if (m.dividendYield !== 0) {
        ctx.addIssue({
          code: 'custom',
          path: ['dividendYield'],
          message: `applies only to kind equity (got kind ${m.kind})`,
        });
      }
      if (m.dividends.length > 0) {
        ctx.addIssue({
          code: 'custom',
          path: ['dividends'],
          message: `apply only to kind equity (got kind ${m.kind})`,
        });
      }
    }
  }, whenClean)
  .overwrite((m) => {
    if (m.dividends.length > 1) m.dividends.sort((a, b) => parseTs(a.exDate) - parseTs(b.exDate));
    return m;
  });

// ---------------------------------------------------------------- spot

export const spotSchema = z.object({
  type: z.literal('spot'),
  underlying: nameField,
  price: positiveNumber,
  ts: tsField,
});

// ---------------------------------------------------------------- vol-surface

const VOL_RANGE = 'must be > 0 and <= 10';

export const volSurfaceSchema = z
  .object({
    type: z.literal('vol-surface'),
    underlying: nameField,
    ts: tsField,
    expiries: z.array(tsField).min(1, 'must list at least one expiry'),
    strikes: z.array(positiveNumber).min(1, 'must list at least one strike'),
    vols: z.array(z.array(z.number().gt(0, VOL_RANGE).lte(10, VOL_RANGE))),
  })
  .superRefine((m, ctx) => {
    checkStrictlyIncreasing(m.expiries, ['expiries'], ctx, (v) => parseTs(String(v)));
    checkStrictlyIncreasing(m.strikes, ['strikes'], ctx);
    if (m.vols.length !== m.expiries.length) {
      ctx.addIssue({
        code: 'custom',
        path: ['vols'],
        message: `must have one row per expiry (${m.expiries.length}), got ${m.vols.length}`,
      });
      return;
    }
    m.vols.forEach((row, i) => {
      if (row.length !== m.strikes.length) {
        ctx.addIssue({
          code: 'custom',
          path: ['vols', i],
          message: `must have one vol per strike (${m.strikes.length}), got ${row.length}`,
        });
      }
    });
  }, whenClean);

// ---------------------------------------------------------------- curve

export const curveSchema = z
  .object({
    type: z.literal('curve'),
    currency: currencyField,
    ts: tsField,
    tenors: z.array(positiveNumber).min(1, 'must list at least one tenor'),
    zeroRates: z.array(rateField),
  })
  .superRefine((m, ctx) => {
    checkStrictlyIncreasing(m.tenors, ['tenors'], ctx);
    if (m.zeroRates.length !== m.tenors.length) {
      ctx.addIssue({
        code: 'custom',
        path: ['zeroRates'],
        message: `must have one rate per tenor (${m.tenors.length}), got ${m.zeroRates.length}`,
      });
    }
  }, whenClean);

// ---------------------------------------------------------------- trade

const multiplierField = positiveNumber.default(1);

const optionInstrumentSchema = z
  .object({
    kind: z.literal('option'),
    right: z.enum(OPTION_RIGHTS),
    payoff: z.enum(OPTION_PAYOFFS).default('vanilla'),
    strike: positiveNumber,
    expiry: tsField,
    multiplier: multiplierField,
    cashAmount: positiveNumber.optional(),
    exercise: z.literal('european', 'must be european (the only exercise style in v1)').optional(),
  })
  .superRefine((ins, ctx) => {
    if (ins.payoff === 'cash-digital' && ins.cashAmount === undefined) {
      ctx.addIssue({
        code: 'custom',
        path: ['cashAmount'],
        message: 'is required (> 0) for payoff cash-digital',
      });
    }
    if (ins.payoff !== 'cash-digital' && ins.cashAmount !== undefined) {
      ctx.addIssue({
        code: 'custom',
        path: ['cashAmount'],
        message: `applies only to payoff cash-digital (got payoff ${ins.payoff})`,
      });
    }
  }, whenClean);

const linearInstrumentSchema = z.object({
  kind: z.literal('linear'),
  multiplier: multiplierField,
});

const instrumentSchema = z.discriminatedUnion('kind', [optionInstrumentSchema, linearInstrumentSchema]);

const tradeBookingFields = {
  type: z.literal('trade'),
  tradeId: idField,
  version: versionField,
  ts: tsField,
  desk: nameField,
  book: nameField,
  underlying: nameField,
  instrument: instrumentSchema,
  quantity: finiteNumber,
  price: z.number().gte(0, 'must be >= 0'),
};

const tradeNewSchema = z.object({ ...tradeBookingFields, action: z.literal('new') });
const tradeAmendSchema = z.object({ ...tradeBookingFields, action: z.literal('amend') });
const tradeCancelSchema = z.object({
  type: z.literal('trade'),
  tradeId: idField,
  version: versionField,
  action: z.literal('cancel'),
  underlying: nameField,
  ts: tsField,
});

export const tradeSchema = z.discriminatedUnion('action', [
  tradeNewSchema,
  tradeAmendSchema,
  tradeCancelSchema,
]);

// ---------------------------------------------------------------- limits

const limitScopeSchema = z.object({
  desk: nameField.optional(),
  book: nameField.optional(),
  underlying: nameField.optional(),
  tenor: z.enum(TENORS).optional(),
});

export const limitSchema = z
  .object({
    type: z.literal('limit'),
    limitId: idField,
    scope: limitScopeSchema,
    metric: z.enum(METRICS),
    max: positiveNumber.optional(),
    min: z.number().lt(0, 'must be < 0').optional(),
    warnAt: z.number().gt(0, 'must be > 0 and < 1').lt(1, 'must be > 0 and < 1').default(0.8),
    hysteresis: z.number().gte(0, 'must be >= 0 and < 0.5').lt(0.5, 'must be >= 0 and < 0.5').default(0.05),
    ts: tsField,
  })
  .superRefine((m, ctx) => {
    if (m.max === undefined && m.min === undefined) {
      ctx.addIssue({
        code: 'custom',
        path: [],
        message: 'must set max (> 0) or min (< 0), or both',
      });
    }
    if (UNDERLYING_ONLY_METRICS.includes(m.metric) && m.scope.underlying === undefined) {
      ctx.addIssue({
        code: 'custom',
        path: ['scope'],
        message: `must include underlying for metric ${m.metric}`,
      });
    }
    if (m.hysteresis >= m.warnAt) {
      ctx.addIssue({
        code: 'custom',
        path: ['hysteresis'],
        message: `must be below warnAt (${m.warnAt}), else a warning could never clear`,
      });
    }
  }, whenClean);

export const limitRemoveSchema = z.object({
  type: z.literal('limit-remove'),
  limitId: idField,
  ts: tsField,
});

// ---------------------------------------------------------------- the union

/** Schemas by message type, for dispatching without trying each one. */
export const INPUT_SCHEMAS = {
  underlying: underlyingSchema,
  spot: spotSchema,
  'vol-surface': volSurfaceSchema,
  curve: curveSchema,
  trade: tradeSchema,
  limit: limitSchema,
  'limit-remove': limitRemoveSchema,
} as const satisfies Record<(typeof INPUT_TYPES)[number], z.ZodType>;

export const inputSchema = z.discriminatedUnion('type', [
  underlyingSchema,
  spotSchema,
  volSurfaceSchema,
  curveSchema,
  tradeSchema,
  limitSchema,
  limitRemoveSchema,
]);

export type UnderlyingMsg = z.infer<typeof underlyingSchema>;
export type Dividend = z.infer<typeof dividendSchema>;
export type SpotMsg = z.infer<typeof spotSchema>;
export type VolSurfaceMsg = z.infer<typeof volSurfaceSchema>;
export type CurveMsg = z.infer<typeof curveSchema>;
export type OptionInstrument = z.infer<typeof optionInstrumentSchema>;
export type LinearInstrument = z.infer<typeof linearInstrumentSchema>;
export type Instrument = OptionInstrument | LinearInstrument;
/** A `new` or `amend`: carries the whole trade. */
export type TradeBookingMsg = z.infer<typeof tradeNewSchema> | z.infer<typeof tradeAmendSchema>;
export type TradeCancelMsg = z.infer<typeof tradeCancelSchema>;
export type TradeMsg = z.infer<typeof tradeSchema>;
export type LimitScope = z.infer<typeof limitScopeSchema>;
export type LimitMsg = z.infer<typeof limitSchema>;
export type LimitRemoveMsg = z.infer<typeof limitRemoveSchema>;
export type InputMsg = z.infer<typeof inputSchema>;
