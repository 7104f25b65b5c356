/** One benchmark's measured figures, printed by `npm run bench` and quoted in README. */
export interface BenchResult {
  /** Short name, e.g. `record-overhead`. */
  name: string;
  /** What was measured, one line. */
  description: string;
  /** Named figures (ratios, throughputs, memory), with units in the names. */
  figures: Record<string, number>;
  /** Targets from the issues, for the same figure names: `<= 1.2`, `>= 1000`. */
  targets?: Record<string, string>;
  /** Free-form notes (conditions, sizes). */
  notes?: string[];
}

/** A benchmark: a function that measures and returns figures. */
export type Benchmark = () => Promise<BenchResult>;
