/**
 * Short words for a recorded modulation's spatial window, so that every place a modulation is named
 * (verdicts, report legends and run labels) tells a windowed modulation from the same one without a window.
 */

/**
 * "gaussian window at (0.3, 0.5) σ 0.15" or "box window x 0–0.5, y 0–1", with ", outside ×0.8" when the
 * gain outside the window is not 1; null when `window` is absent or not a window record.
 * @param window a `SpatialWindow` as a manifest stores it (any JSON value is accepted).
 */
export function windowLabel(window: unknown): string | null {
  if (typeof window !== 'object' || window === null) return null;
  const w = window as Record<string, unknown>;
  const n = (key: string) => (typeof w[key] === 'number' ? Number((w[key] as number).toPrecision(3)) : '?');
  const outside = typeof w['outside'] === 'number' && w['outside'] !== 1 ? `, outside ×${n('outside')}` : '';
  if (w['shape'] === 'gaussian') return `gaussian window at (${n('cx')}, ${n('cy')}) σ ${n('sigma')}${outside}`;
  if (w['shape'] === 'box') return `box window x ${n('x0')}–${n('x1')}, y ${n('y0')}–${n('y1')}${outside}`;
  return null;
}

/**
 * The windows of a snapshot manifest's `modulation` ({ modulations: [{ site, window }] }), one phrase per
 * windowed site: "gaussian window at (0.3, 0.5) σ 0.15 at relu1"; empty when no modulation has a window.
 */
export function modulationWindows(modulation: unknown): string[] {
  const list = (modulation as { modulations?: unknown } | null)?.modulations;
  if (!Array.isArray(list)) return [];
  const several = list.length > 1;
  return list.flatMap((m: unknown) => {
    const record = (m ?? {}) as { window?: unknown; site?: unknown };
    const label = windowLabel(record.window);
    if (label === null) return [];
    return [several && typeof record.site === 'string' ? `${label} at ${record.site}` : label];
  });
}
