/** Number formatting shared by terminal tables and CSV. NaN prints as "–" in tables, empty in CSV. */
export function fixed(value: number | null | undefined, digits = 3): string {
  if (value === null || value === undefined || Number.isNaN(value)) return '–';
  if (!Number.isFinite(value)) return value > 0 ? '∞' : '-∞';
  return value.toFixed(digits);
}

/** Compact scientific or fixed notation for values spanning many decades (relative changes). */
export function compact(value: number | null | undefined): string {
  if (value === null || value === undefined || Number.isNaN(value)) return '–';
  if (!Number.isFinite(value)) return value > 0 ? '∞' : '-∞';
  if (value === 0) return '0';
  const magnitude = Math.abs(value);
  return magnitude >= 0.01 && magnitude < 1000 ? value.toPrecision(3) : value.toExponential(2);
}

/** A signed value: "+0.42" / "-1.30"; a value that rounds to zero is "+0.00" (never "-0.00"); "–" for NaN. */
export function signed(value: number, digits = 2): string {
  if (Number.isNaN(value)) return '–';
  if (!Number.isFinite(value)) return value > 0 ? '+∞' : '-∞';
  const text = Math.abs(value).toFixed(digits);
  return `${value < 0 && Number(text) !== 0 ? '-' : '+'}${text}`;
}

/** A horizontal bar of `width` cells for value in [0, 1] (eighth-block resolution). */
export function bar(fraction: number, width = 12): string {
  if (!Number.isFinite(fraction)) return '';
  const clamped = Math.max(0, Math.min(1, fraction));
  const eighths = Math.round(clamped * width * 8);
  const full = Math.floor(eighths / 8);
  const rest = eighths % 8;
  return '█'.repeat(full) + (rest > 0 ? '▏▎▍▌▋▊▉'[rest - 1]! : '');
}

/** One CSV field (RFC 4180 quoting). */
export function csvField(value: unknown): string {
  if (value === null || value === undefined || (typeof value === 'number' && Number.isNaN(value))) return '';
  const text = typeof value === 'number' && !Number.isFinite(value) ? (value > 0 ? 'inf' : '-inf') : String(value);
  return /[",\n\r]/.test(text) ? `"${text.replace(/"/g, '""')}"` : text;
}
