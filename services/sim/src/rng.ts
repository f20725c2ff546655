/**
 * Seeded random streams. Each simulated process (diffusion, tick selection, trade flow, ...) owns
 * its own stream, so what one process draws never shifts another's: the output for a seed is the
 * same however the caller slices time into steps.
 */

/** splitmix32: spreads a small seed over the 128-bit state of the generator below. */
function splitmix32(seed: number): () => number {
  let s = seed >>> 0;
  return () => {
    s = (s + 0x9e3779b9) >>> 0;
    let z = s;
    z = Math.imul(z ^ (z >>> 16), 0x85ebca6b) >>> 0;
    z = Math.imul(z ^ (z >>> 13), 0xc2b2ae35) >>> 0;
    return (z ^ (z >>> 16)) >>> 0;
  };
}

/** Small fast counter generator (sfc32, public-domain design); period about 2^128. */
export class Rng {
  private a: number;
  private b: number;
  private c: number;
  private d: number;
  private spareNormal: number | null = null;

  constructor(seed: number, stream = 0) {
    const mix = splitmix32((seed ^ Math.imul(stream + 1, 0x27d4eb2d)) >>> 0);
    this.a = mix();
    this.b = mix();
    this.c = mix();
    this.d = mix();
    for (let i = 0; i < 12; i++) this.nextU32();
  }

  nextU32(): number {
    const t = (((this.a + this.b) >>> 0) + this.d) >>> 0;
    this.d = (this.d + 1) >>> 0;
    this.a = this.b ^ (this.b >>> 9);
    this.b = (this.c + (this.c << 3)) >>> 0;
    this.c = ((this.c << 21) | (this.c >>> 11)) >>> 0;
    this.c = (this.c + t) >>> 0;
    return t;
  }

  /** Uniform in [0, 1) with 53 random bits. */
  uniform(): number {
    const hi = this.nextU32() >>> 5;
    const lo = this.nextU32() >>> 6;
    return (hi * 67108864 + lo) / 9007199254740992;
  }

  /** Uniform in (0, 1): safe under log. */
  uniformOpen(): number {
    let u = this.uniform();
    while (u === 0) u = this.uniform();
    return u;
  }

  between(lo: number, hi: number): number {
    return lo + (hi - lo) * this.uniform();
  }

  /** Integer in [lo, hi], both included. */
  int(lo: number, hi: number): number {
    return lo + Math.floor(this.uniform() * (hi - lo + 1));
  }

  chance(p: number): boolean {
    return this.uniform() < p;
  }

  pick<T>(items: readonly T[]): T {
    if (items.length === 0) throw new RangeError('pick from an empty list');
    return items[Math.floor(this.uniform() * items.length)] as T;
  }

  /** Index drawn with probability proportional to its weight. */
  weightedIndex(weights: readonly number[], total?: number): number {
    const sum = total ?? weights.reduce((s, w) => s + w, 0);
    let u = this.uniform() * sum;
    for (let i = 0; i < weights.length; i++) {
      u -= weights[i] ?? 0;
      if (u < 0) return i;
    }
    return weights.length - 1;
  }

  /** Standard normal (Marsaglia's polar method, the second draw kept for the next call). */
  normal(): number {
    if (this.spareNormal !== null) {
      const z = this.spareNormal;
      this.spareNormal = null;
      return z;
    }
    let u: number;
    let v: number;
    let s: number;
    do {
      u = 2 * this.uniform() - 1;
      v = 2 * this.uniform() - 1;
      s = u * u + v * v;
    } while (s >= 1 || s === 0);
    const f = Math.sqrt((-2 * Math.log(s)) / s);
    this.spareNormal = v * f;
    return u * f;
  }

  /** Exponential with the given mean. */
  exponential(mean: number): number {
    return -Math.log(this.uniformOpen()) * mean;
  }

  /** Poisson count by inversion; the simulator only asks for small means (jumps per tick). */
  poisson(mean: number): number {
    if (mean <= 0) return 0;
    const limit = Math.exp(-mean);
    let k = 0;
    let p = this.uniform();
    while (p > limit) {
      k++;
      p *= this.uniform();
    }
    return k;
  }
}

/** The stream numbers, one per simulated process. */
export const STREAM = {
  universe: 1,
  diffusion: 2,
  ticks: 3,
  trades: 4,
  surfaces: 5,
  curves: 6,
  malformed: 7,
  outages: 8,
  book: 9,
  limits: 10,
} as const;
