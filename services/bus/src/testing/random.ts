// Seeded inputs for the unit tests of the kafkajs replacements (never loaded outside tests).

/** A linear congruential generator (the C standard's constants), in [0, 1). */
export function rng(seed: number): () => number {
  return () => {
    seed = (Math.imul(seed, 1103515245) + 12345) >>> 0;
    return seed / 2 ** 32;
  };
}

/** `len` characters: ASCII mostly, some two-, three- and four-byte UTF-8. */
export function text(r: () => number, len: number): string {
  let s = '';
  for (let i = 0; i < len; i++) {
    const c = r();
    s += c < 0.85 ? String.fromCharCode(32 + Math.floor(r() * 95)) : c < 0.93 ? 'é' : c < 0.98 ? '€' : '🦊';
  }
  return s;
}
