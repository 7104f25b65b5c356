/**
 * The page around the report's sections: document head with inline CSS (system fonts, no external
 * resources), header with the headline (what was found, and the caveat in one line linking to the full
 * one), table of contents, the sections, the full caveat, the inputs, and the definitions footer. Below
 * 700 px the margins shrink and charts keep their size, scrolling inside their own box. Pure text assembly.
 */
import { html, SafeHtml } from './markup.js';

/** One section of the page: an anchor id (fixed by the report, not input text), a heading, its body. */
export interface PageSection {
  id: string;
  heading: string;
  body: SafeHtml;
}

const CSS = `
:root { --ink: #1d2430; --muted: #5b6573; --line: #dde1e6; --accent: #33618f; --paper: #ffffff; --bg: #f4f5f7; }
* { box-sizing: border-box; }
body { margin: 0; font: 14px/1.45 system-ui, -apple-system, "Segoe UI", Roboto, "Helvetica Neue", Arial, sans-serif; color: var(--ink); background: var(--bg); }
main { max-width: 1240px; margin: 0 auto; padding: 24px 20px 40px; }
header h1 { font-size: 24px; margin: 0 0 2px; letter-spacing: -0.01em; }
header .sub { color: var(--muted); margin: 0 0 12px; }
nav { margin: 8px 0 0; font-size: 13px; }
nav a { color: var(--accent); text-decoration: none; margin-right: 14px; }
section { background: var(--paper); border: 1px solid var(--line); border-radius: 8px; padding: 16px 20px 18px; margin: 16px 0; }
h2 { font-size: 18px; margin: 0 0 4px; }
h2 + .lead { margin-top: 0; }
h3 { font-size: 14.5px; margin: 18px 0 8px; }
.lead { color: var(--muted); margin: 0 0 12px; max-width: 1000px; }
.pair { display: grid; grid-template-columns: auto minmax(0, 1fr); gap: 22px; align-items: start; }
.pair > * { min-width: 0; }
.pair td, .pair th { white-space: normal; }
.pair td.num, .pair th.num { white-space: nowrap; }
.tables { display: flex; flex-wrap: wrap; gap: 14px 36px; align-items: flex-start; }
.tables > * { min-width: 0; max-width: 100%; }
@media (max-width: 1000px) { .pair { grid-template-columns: minmax(0, 1fr); } }
figure { margin: 0; }
figcaption { color: var(--muted); font-size: 12.5px; max-width: 640px; margin-top: 6px; }
svg.marks { max-width: 100%; height: auto; display: block; }
.headline { background: var(--paper); border: 1px solid var(--line); border-left: 5px solid var(--accent); border-radius: 8px; padding: 12px 18px; margin: 14px 0 6px; }
.headline p { margin: 0 0 6px; font-size: 16px; line-height: 1.5; max-width: 1000px; }
.headline p.caveat-line { font-size: 13px; color: var(--muted); margin: 0; }
.headline a { color: var(--accent); }
figure.chart { max-width: 100%; overflow-x: auto; }
.pictures { display: flex; flex-wrap: wrap; gap: 12px 22px; align-items: flex-start; }
.pictures figure { margin: 0; }
img.raster { image-rendering: pixelated; display: block; border: 1px solid var(--line); }
@media (max-width: 700px) {
  main { padding: 12px 8px 30px; }
  section { padding: 12px 10px 14px; }
  header h1 { font-size: 20px; }
  /* a chart shrinks to at most 70 % of its drawn size (--chart-width), then scrolls inside its own box:
     text stays at 70 % or more of its size instead of ~3 px */
  figure.chart svg.marks { min-width: calc(0.7 * var(--chart-width, 0px)); }
  .headline p { font-size: 15px; }
}
.table-wrap { overflow-x: auto; margin-bottom: 10px; }
table { border-collapse: collapse; font-size: 12.5px; font-variant-numeric: tabular-nums; }
caption { caption-side: bottom; text-align: left; color: var(--muted); font-size: 12px; padding-top: 6px; }
th, td { padding: 3px 9px; border-bottom: 1px solid #eceef1; text-align: left; white-space: nowrap; }
th { background: #f1f3f6; font-weight: 600; }
td.num, th.num { text-align: right; }
tr.site td { background: #fff4dc; font-weight: 600; }
tr.mean td { border-top: 2px solid var(--line); font-weight: 600; }
.inputs td:nth-child(3) { white-space: normal; }
.caveat { border-left: 5px solid #c58b00; background: #fffaf0; }
.caveat p { margin: 4px 0 0; max-width: 1000px; }
ul.verdicts { margin: 6px 0 0; padding-left: 18px; }
ul.verdicts li { margin: 5px 0; }
.name { font-weight: 600; }
.note { color: var(--muted); font-size: 12.5px; }
details > summary { cursor: default; font-weight: 600; margin: 10px 0 6px; }
footer { color: var(--muted); font-size: 12.5px; }
footer dl { display: grid; grid-template-columns: max-content 1fr; gap: 3px 14px; margin: 6px 0 0; }
footer dt { font-weight: 600; color: var(--ink); }
footer dd { margin: 0; }
`;

const CAVEAT = 'These results describe an artificial neural network and modulations injected into it by Sonde. The gain patterns follow a model of feature-based attention (feature-similarity gain), but applying that model to a network is an assumption, and nothing on this page is a measurement of neurons, of a brain, or of a person\u2019s behaviour: an effect that appears here need not exist in a visual system, and an effect that is absent here says nothing about one. Changes are compared with the network\u2019s own noise floor (rounding, or a control pairing), detection is scored against a threshold fixed on the baseline run, and intervals are bootstrap intervals over the stimuli used, which are one finite sample of displays.';

const DEFINITIONS: ReadonlyArray<[string, string]> = [
  ['relative change', '‖mod − base‖ / ‖base‖ over all values of a layer and all stimuli'],
  ['channel ratio', 'modulated ÷ baseline mean activity of a channel (at token layers: of a feature, over all tokens — the feature ratio; tables mixing both say unit ratio)'],
  ['signature slope', 'slope of channel ratio against the channel\u2019s tuning rank for the attended category (negative: preferring channels gain more)'],
  ['depth profile', 'least-squares fit of ln(relative change) against layers below the site; half-depth = ln 2 / |rate|'],
  ['d′, criterion', 'z(H) − z(F) and −(z(H) + z(F)) / 2 from hit rate H and false-alarm rate F (log-linear correction at 0 and 1)'],
  ['strength', 'β of the gain g_k = max(0, 1 + β·v_k), v the tuning or sensitivity values of the cued category; the shuffled control permutes them across channels'],
];

/**
 * The whole page.
 * @param options title, a subtitle line, the header's inputs table, and the sections in order.
 * @returns the HTML document text.
 */
export function renderPage(options: { title: string; subtitle: string; inputs: SafeHtml; sections: readonly PageSection[]; headline?: SafeHtml | null }): string {
  const nav = options.sections.map((s) => html`<a href="#${s.id}">${s.heading}</a>`);
  const sections = options.sections.map((s) => html`<section id="${s.id}"><h2>${s.heading}</h2>${s.body}</section>`);
  const definitions = DEFINITIONS.map(([term, text]) => html`<dt>${term}</dt><dd>${text}</dd>`);
  const page = html`<!DOCTYPE html>
<html lang="en">
<head>
<meta charset="utf-8">
<meta name="viewport" content="width=device-width, initial-scale=1">
<title>${options.title}</title>
<style>${new SafeHtml(CSS)}</style>
</head>
<body>
<main>
<header>
<h1>${options.title}</h1>
<p class="sub">${options.subtitle}</p>
${options.headline ?? ''}
<nav>${nav}<a href="#inputs">Inputs</a></nav>
</header>
${sections}
<section class="caveat" id="caveat"><h2>What these results are</h2><p>${CAVEAT}</p></section>
<section id="inputs"><h2>Inputs</h2>${options.inputs}</section>
<section><footer><h2>Definitions</h2><dl>${definitions}</dl></footer></section>
</main>
</body>
</html>
`;
  return page.text;
}
