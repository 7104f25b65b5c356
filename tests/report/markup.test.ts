import { describe, expect, it } from 'vitest';
import { escapeHtml, html, joinHtml, SafeHtml } from '../../src/report/html/markup.js';

describe('escapeHtml', () => {
  it('escapeHtml(text) replaces the five characters HTML gives meaning to in text and quoted attributes', () => {
    // HTML Living Standard, "Serializing HTML fragments" (escaping a string: & < > in text, " in attribute
    // mode); the apostrophe as well, so single-quoted attributes are safe (OWASP XSS Prevention Cheat Sheet,
    // output encoding for HTML contexts). Both from memory.
    expect(escapeHtml(`<script>alert("x") & 'y'</script>`)).toBe('&lt;script&gt;alert(&quot;x&quot;) &amp; &#39;y&#39;&lt;/script&gt;');
  });

  it('escapeHtml(text) leaves other text, including non-ASCII, unchanged and keeps "" empty', () => {
    expect(escapeHtml('relu3 → Δd′ ≥ 0.5 µ')).toBe('relu3 → Δd′ ≥ 0.5 µ');
    expect(escapeHtml('')).toBe('');
  });

  it('escapeHtml(text) escapes an existing entity again (no double-decoding shortcut)', () => {
    expect(escapeHtml('&lt;')).toBe('&amp;lt;');
  });
});

describe('html', () => {
  it('html`…` escapes interpolated strings and numbers but not the literal parts', () => {
    const name = '<b onmouseover="x">';
    expect(html`<td class="n">${name}</td><td>${42}</td>`.text).toBe('<td class="n">&lt;b onmouseover=&quot;x&quot;&gt;</td><td>42</td>');
  });

  it('html`…` inserts SafeHtml as is, joins arrays, and prints nothing for null, undefined and false', () => {
    const inner = html`<i>${'a&b'}</i>`;
    expect(html`<p>${inner}${[html`<br>`, '<x>']}${null}${undefined}${false}</p>`.text).toBe('<p><i>a&amp;b</i><br>&lt;x&gt;</p>');
  });

  it('html`…` returns SafeHtml whose toString is the markup', () => {
    const out = html`<p>${'1 < 2'}</p>`;
    expect(out).toBeInstanceOf(SafeHtml);
    expect(String(out)).toBe('<p>1 &lt; 2</p>');
  });

  it('joinHtml(parts, separator) escapes the parts and keeps the separator as markup', () => {
    expect(joinHtml(['a<b', html`<em>c</em>`], '<br>').text).toBe('a&lt;b<br><em>c</em>');
  });
});
