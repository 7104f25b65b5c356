/**
 * Short words for a recorded modulation's spatial window or token selection, so that every place a
 * modulation is named (verdicts, report legends and run labels) tells a windowed or token-selective
 * modulation from the same one everywhere.
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
 * "token selection class, patch [1, 2], token 5" (", every patch" for `patches`), with ", outside ×0.5" when
 * the gain elsewhere is not 1; null when `tokens` is absent or not a token selection record.
 * @param tokens a `TokenSelection` as a manifest stores it (any JSON value is accepted).
 */
export function tokensLabel(tokens: unknown): string | null {
  if (typeof tokens !== 'object' || tokens === null) return null;
  const t = tokens as { at?: unknown; outside?: unknown };
  if (!Array.isArray(t.at) || t.at.length === 0) return null;
  const words = t.at.slice(0, 6).map((c: unknown) => (Array.isArray(c) ? `patch [${c.join(', ')}]` : c === 'patches' ? 'every patch' : c === 'class' ? 'class' : `token ${String(c)}`));
  const more = t.at.length > 6 ? `, … (${t.at.length} in all)` : '';
  const outside = typeof t.outside === 'number' && t.outside !== 1 ? `, outside ×${Number(t.outside.toPrecision(3))}` : '';
  return `token selection ${words.join(', ')}${more}${outside}`;
}

/**
 * The windows (and token selections) of a snapshot manifest's `modulation` ({ modulations: [{ site, window }] }), one phrase per
 * windowed site: "gaussian window at (0.3, 0.5) σ 0.15 at relu1"; empty when no modulation has a window.
 */
export function modulationWindows(modulation: unknown): string[] {
  const list = (modulation as { modulations?: unknown } | null)?.modulations;
  if (!Array.isArray(list)) return [];
  const several = list.length > 1;
  return list.flatMap((m: unknown) => {
    const record = (m ?? {}) as { window?: unknown; tokens?: unknown; site?: unknown };
    const label = windowLabel(record.window) ?? tokensLabel(record.tokens);
    if (label === null) return [];
    return [several && typeof record.site === 'string' ? `${label} at ${record.site}` : label];
  });
}
