/**
 * The float reference for the sampler bench: standard normal draws by Box–Muller on Math.random.
 * Bench only: this is what the exact samplers are compared against, never a noise source (nothing
 * under runtime/ uses Math.random or float noise).
 */

/** Draws n float Gaussians and returns their sum (so the work cannot be optimised away). */
export function floatGaussianBatch(n: number): number {
  let acc = 0;
  let i = 0;
  while (i < n) {
    const u = 1 - Math.random(); // (0, 1]
    const v = Math.random();
    const r = Math.sqrt(-2 * Math.log(u));
    acc += r * Math.cos(2 * Math.PI * v);
    i++;
    if (i < n) {
      acc += r * Math.sin(2 * Math.PI * v);
      i++;
    }
  }
  return acc;
}
