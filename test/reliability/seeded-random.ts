/**
 * A small seeded PRNG (mulberry32, T. Ettinger, public domain; from memory) for reproducible test
 * inputs: fuzz frames, the order of the two arms in the timing test and the label swaps of its
 * permutation test. Test-only: it never comes near noise, which uses runtime/core/random.ts.
 */
export function mulberry32(seed: number): () => number {
  let a = seed >>> 0;
  return () => {
    a = (a + 0x6d2b79f5) >>> 0;
    let t = a;
    t = Math.imul(t ^ (t >>> 15), t | 1);
    t ^= t + Math.imul(t ^ (t >>> 7), t | 61);
    return (t ^ (t >>> 14)) >>> 0;
  };
}

/** The same generator as a uniform on [0, 1) (32 bits). */
export function seededRandom(seed: number): () => number {
  const next = mulberry32(seed);
  return () => next() / 4294967296;
}
