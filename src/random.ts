/**
 * Seeded pseudo-random numbers. Everything random in Sonde (stimulus generation, noise modulation,
 * bootstrap resampling, shuffled controls) draws from here so that a seed reproduces a run exactly,
 * on any machine: the generator is integer arithmetic only (Math.imul), no platform-dependent state.
 */

/** A seeded stream of uniform and normal variates. */
export interface Random {
  /** Uniform in [0, 1), 32 bits of resolution. */
  uniform(): number;
  /** Uniform integer in [0, n). */
  int(n: number): number;
  /** Standard normal variate (Box–Muller, both values used). */
  normal(): number;
  /** A new independent stream derived from this one's seed and `label` (stable across runs). */
  fork(label: string | number): Random;
}

/**
 * Creates a generator from an integer or string seed. The core is SplitMix32-style hashing of a
 * Weyl sequence (Steele, Lea & Flood 2014, "Fast splittable pseudorandom number generators"),
 * which passes common statistical batteries and is trivially reproducible.
 */
export function createRandom(seed: number | string): Random {
  return new SplitMix(typeof seed === 'number' ? seed >>> 0 : hashString(seed));
}

/** FNV-1a 32-bit hash of a string; used to turn labels and string seeds into integer seeds. */
export function hashString(text: string): number {
  let h = 0x811c9dc5;
  for (let i = 0; i < text.length; i++) {
    h ^= text.charCodeAt(i);
    h = Math.imul(h, 0x01000193);
  }
  return h >>> 0;
}

class SplitMix implements Random {
  private state: number;
  private readonly seed: number;
  private spare: number | null = null;

  constructor(seed: number) {
    this.seed = seed >>> 0;
    this.state = this.seed;
  }

  private next32(): number {
    this.state = (this.state + 0x9e3779b9) | 0;
    let z = this.state;
    z = Math.imul(z ^ (z >>> 16), 0x85ebca6b);
    z = Math.imul(z ^ (z >>> 13), 0xc2b2ae35);
    return (z ^ (z >>> 16)) >>> 0;
  }

  uniform(): number {
    return this.next32() / 4294967296;
  }

  int(n: number): number {
    return Math.floor(this.uniform() * n);
  }

  normal(): number {
    if (this.spare !== null) {
      const value = this.spare;
      this.spare = null;
      return value;
    }
    let u = 0;
    while (u === 0) u = this.uniform();
    const v = this.uniform();
    const radius = Math.sqrt(-2 * Math.log(u));
    this.spare = radius * Math.sin(2 * Math.PI * v);
    return radius * Math.cos(2 * Math.PI * v);
  }

  fork(label: string | number): Random {
    const mixed = Math.imul(this.seed ^ hashString(String(label)), 0x9e3779b1) ^ 0x5bd1e995;
    return new SplitMix(mixed >>> 0);
  }
}
