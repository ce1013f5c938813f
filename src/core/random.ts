/**
 * The one seeded generator every sampling step receives, so the same seed gives the same
 * selection and a resumed job continues the same stream (`state()` / `Rng.fromState`).
 *
 * xoshiro128** (Blackman & Vigna, "Scrambled linear pseudorandom number generators", 2018),
 * seeded through splitmix32 so that nearby seeds give unrelated streams.
 */
export class Rng {
  private s0: number;
  private s1: number;
  private s2: number;
  private s3: number;
  private spareNormal: number | null = null;

  constructor(seed: number) {
    let x = seed >>> 0;
    const next = (): number => {
      // splitmix32
      x = (x + 0x9e3779b9) >>> 0;
      let z = x;
      z = Math.imul(z ^ (z >>> 16), 0x85ebca6b) >>> 0;
      z = Math.imul(z ^ (z >>> 13), 0xc2b2ae35) >>> 0;
      return (z ^ (z >>> 16)) >>> 0;
    };
    this.s0 = next();
    this.s1 = next();
    this.s2 = next();
    this.s3 = next();
    if ((this.s0 | this.s1 | this.s2 | this.s3) === 0) this.s0 = 1;
  }

  static fromState(state: readonly number[]): Rng {
    const rng = new Rng(0);
    [rng.s0, rng.s1, rng.s2, rng.s3] = state.map((v) => v >>> 0);
    return rng;
  }

  /** Continues the stream from a saved state (as `fromState`, in place). */
  restore(state: readonly number[]): void {
    [this.s0, this.s1, this.s2, this.s3] = state.map((v) => v >>> 0);
  }

  state(): number[] {
    return [this.s0, this.s1, this.s2, this.s3];
  }

  /** Next 32 random bits as an unsigned integer. */
  nextUint32(): number {
    const result = Math.imul(rotl(Math.imul(this.s1, 5) >>> 0, 7), 9) >>> 0;
    const t = (this.s1 << 9) >>> 0;
    this.s2 = (this.s2 ^ this.s0) >>> 0;
    this.s3 = (this.s3 ^ this.s1) >>> 0;
    this.s1 = (this.s1 ^ this.s2) >>> 0;
    this.s0 = (this.s0 ^ this.s3) >>> 0;
    this.s2 = (this.s2 ^ t) >>> 0;
    this.s3 = rotl(this.s3, 11);
    return result;
  }

  /** Uniform in [0, 1) with 53 random bits. */
  next(): number {
    const hi = this.nextUint32() >>> 5; // 27 bits
    const lo = this.nextUint32() >>> 6; // 26 bits
    return (hi * 67108864 + lo) / 9007199254740992;
  }

  /** Uniform integer in [0, n). */
  int(n: number): number {
    return Math.floor(this.next() * n);
  }

  /** Standard normal (Marsaglia polar method). */
  normal(): number {
    if (this.spareNormal !== null) {
      const v = this.spareNormal;
      this.spareNormal = null;
      return v;
    }
    for (;;) {
      const u = 2 * this.next() - 1;
      const v = 2 * this.next() - 1;
      const s = u * u + v * v;
      if (s > 0 && s < 1) {
        const m = Math.sqrt((-2 * Math.log(s)) / s);
        this.spareNormal = v * m;
        return u * m;
      }
    }
  }

  /** m distinct integers from [0, n), in random order (Floyd's algorithm; O(m) memory). */
  sample(n: number, m: number): Int32Array {
    if (m > n) throw new RangeError(`cannot sample ${m} of ${n}`);
    const chosen = new Set<number>();
    const out = new Int32Array(m);
    let at = 0;
    for (let j = n - m; j < n; j++) {
      const t = this.int(j + 1);
      const v = chosen.has(t) ? j : t;
      chosen.add(v);
      out[at++] = v;
    }
    this.shuffle(out);
    return out;
  }

  shuffle<T extends { length: number; [i: number]: number }>(a: T): T {
    for (let i = a.length - 1; i > 0; i--) {
      const j = this.int(i + 1);
      const t = a[i];
      a[i] = a[j];
      a[j] = t;
    }
    return a;
  }
}

function rotl(x: number, k: number): number {
  return ((x << k) | (x >>> (32 - k))) >>> 0;
}
