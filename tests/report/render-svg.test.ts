import { describe, expect, it } from 'vitest';
import { RuntimeFailure } from '../../src/errors.js';
import { assertInertSvg, renderSvg, sanitiseSvg } from '../../src/report/html/render-svg.js';
import { HOSTILE } from './fixtures.js';

const bar = (labels: string[]) => ({
  width: 200,
  height: 100,
  data: { values: labels.map((label, i) => ({ label, value: i + 1 })) },
  mark: { type: 'bar' as const },
  encoding: { x: { field: 'label', type: 'nominal' as const }, y: { field: 'value', type: 'quantitative' as const } },
});

describe('renderSvg', () => {
  it('renderSvg(spec) draws one mark per datum as SVG paths, with no warnings', async () => {
    const { svg, warnings } = await renderSvg(bar(['a', 'b', 'c']), 't1');
    expect(svg.text.startsWith('<svg')).toBe(true);
    expect(svg.text.match(/aria-roledescription="bar"/g)).toHaveLength(3);
    expect(warnings).toEqual([]);
  });

  it('renderSvg(spec) escapes markup, ampersands and quotes from data in text marks and attributes', async () => {
    // renderSvg has already run assertInertSvg: a quote that broke out of an attribute would have failed it
    const { svg } = await renderSvg(bar([HOSTILE.layer, HOSTILE.category, HOSTILE.site]), 't2');
    for (const text of [HOSTILE.layer, HOSTILE.category, HOSTILE.site]) expect(svg.text.includes(text), text).toBe(false);
    expect(svg.text).not.toMatch(/<script|<img|<b>/i);
    // the axis labels carry the names as escaped text (vega truncates long labels with …)
    expect(svg.text).toContain('&lt;script&gt;');
    expect(svg.text).toContain('ring &amp;');
  });

  it('renderSvg(spec) prefixes element ids and their url(#…) references with the chart id', async () => {
    // a log colour legend uses a gradient: an id and a url(#id) reference
    const spec = {
      width: 120,
      height: 60,
      data: { values: [{ x: 'a', v: 0.01 }, { x: 'b', v: 1 }] },
      mark: { type: 'rect' as const },
      encoding: { x: { field: 'x', type: 'nominal' as const }, color: { field: 'v', type: 'quantitative' as const, scale: { type: 'log' as const } } },
    };
    const { svg } = await renderSvg(spec, 'c7');
    const ids = [...svg.text.matchAll(/\sid="([^"]+)"/g)].map((m) => m[1]!);
    expect(ids.length).toBeGreaterThan(0);
    for (const id of ids) expect(id.startsWith('c7-')).toBe(true);
    for (const ref of svg.text.matchAll(/url\(#([^)]+)\)/g)) expect(ids).toContain(ref[1]);
  });

  it('renderSvg(spec) turns a spec vega cannot compile into a RuntimeFailure naming the chart', async () => {
    await expect(renderSvg({ mark: 'no-such-mark' } as never, 'broken')).rejects.toThrow(/chart broken could not be rendered/);
  });
});

describe('assertInertSvg', () => {
  const wrap = (inner: string) => `<svg xmlns="http://www.w3.org/2000/svg"><g>${inner}</g></svg>`;

  it('assertInertSvg(svg) accepts escaped markup in text and attribute values', () => {
    expect(() => assertInertSvg(wrap('<text aria-label="&lt;script&gt; onload=x">&lt;img onerror=1&gt;</text>'), 'ok')).not.toThrow();
  });

  it.each([
    ['a script element', '<script>alert(1)</script>'],
    ['foreign content', '<foreignObject><div/></foreignObject>'],
    ['an event handler', '<rect onload="alert(1)"/>'],
    ['a link element', '<a href="https://example.org"><text>x</text></a>'],
    ['an href attribute', '<text href="https://example.org">x</text>'],
    ['an xlink:href attribute', '<rect xlink:href="#x"/>'],
    ['an image element', '<image src="x.png"/>'],
    ['an external url()', '<rect fill="url(https://example.org/p.svg#g)"/>'],
    ['a javascript: URL', '<rect style="fill: javascript:alert(1)"/>'],
    ['a malformed tag', '<rect fill="x" <script>'],
  ])('assertInertSvg(svg) refuses %s', (_what, inner) => {
    expect(() => assertInertSvg(wrap(inner), 'bad')).toThrow(RuntimeFailure);
  });

  it('sanitiseSvg(svg) drops an unused xlink namespace and keeps the SVG namespace', () => {
    const out = sanitiseSvg('<svg xmlns="http://www.w3.org/2000/svg" xmlns:xlink="http://www.w3.org/1999/xlink"><g/></svg>', 'p');
    expect(out).toBe('<svg xmlns="http://www.w3.org/2000/svg"><g/></svg>');
  });
});
