// Deterministic random numbers for the statistical tests: xoshiro128** (D. Blackman and
// S. Vigna, "Scrambled linear pseudorandom number generators", ACM TOMS 47 (2021), reference
// code at prng.di.unimi.it), seeded through splitmix32, and Box-Muller normals.

export class Xoshiro128 {
  private a: number;
  private b: number;
  private c: number;
  private d: number;
  private spare = NaN;

  constructor(seed: number) {
    let s = seed >>> 0;
    const next = (): number => {
      // splitmix32: spreads one seed over the four state words, never all zero
      s = (s + 0x9e3779b9) >>> 0;
      let z = s;
      z = Math.imul(z ^ (z >>> 16), 0x85ebca6b);
      z = Math.imul(z ^ (z >>> 13), 0xc2b2ae35);
      return (z ^ (z >>> 16)) >>> 0;
    };
    this.a = next();
    this.b = next();
    this.c = next();
    this.d = next();
  }

  nextUint32(): number {
    const result = Math.imul(rotl(Math.imul(this.b, 5), 7), 9) >>> 0;
    const t = this.b << 9;
    this.c ^= this.a;
    this.d ^= this.b;
    this.b ^= this.c;
    this.a ^= this.d;
    this.c ^= t;
    this.d = rotl(this.d, 11);
    return result;
  }

  /** Uniform on (0, 1): never 0, so log() in Box-Muller stays finite. */
  uniform(): number {
    return (this.nextUint32() + 0.5) / 4294967296;
  }

  /** Standard normal by Box-Muller, both variates used. */
  normal(): number {
    if (!Number.isNaN(this.spare)) {
      const z = this.spare;
      this.spare = NaN;
      return z;
    }
    const r = Math.sqrt(-2 * Math.log(this.uniform()));
    const theta = 2 * Math.PI * this.uniform();
    this.spare = r * Math.sin(theta);
    return r * Math.cos(theta);
  }
}

function rotl(x: number, k: number): number {
  return (x << k) | (x >>> (32 - k));
}
