/**
 * Bounded integer searches. Every search in the interval, planning and quantile code goes through
 * here: the number of predicate calls is bounded by the bit length of the public range searched,
 * never by "until it converges".
 */

/**
 * Smallest i in [low, high] with ok(i), for a predicate that is false then true on the range;
 * null when ok(high) is false. Gallops outward from `hint` (a guess, any value; it only saves
 * calls), then bisects: at most about 3 log2(high - low + 2) calls.
 */
export function firstPassing(ok: (i: bigint) => boolean, low: bigint, high: bigint, hint: bigint = low): bigint | null {
  if (high < low) return null;
  let h = hint < low ? low : hint > high ? high : hint;
  let pass: bigint; // ok(pass) holds
  let fail: bigint; // ok(fail) fails, or low - 1
  if (ok(h)) {
    pass = h;
    let step = 1n;
    for (;;) {
      const c = pass - step;
      if (c < low) {
        fail = low - 1n;
        break;
      }
      if (!ok(c)) {
        fail = c;
        break;
      }
      pass = c;
      step *= 2n;
    }
  } else {
    fail = h;
    let step = 1n;
    for (;;) {
      const c = fail + step;
      if (c >= high) {
        if (!ok(high)) return null;
        pass = high;
        break;
      }
      if (ok(c)) {
        pass = c;
        break;
      }
      fail = c;
      step *= 2n;
    }
  }
  while (pass - fail > 1n) {
    h = (pass + fail) / 2n;
    if (ok(h)) pass = h;
    else fail = h;
  }
  return pass;
}
