/**
 * Draws the pictures of a snapshot pair (`pairPictureData`) as report sections: raster pictures (PNG
 * data URIs: stimuli, feature maps with the window outline) and vega-lite charts rendered to inline SVG
 * (ROC curves, signature scatter, spatial profile). Every figure carries `data-picture="KIND"` so a
 * reader (and the browser test) can find each kind. Names enter charts only as data values.
 */
import type { TopLevelSpec } from 'vega-lite';
import { html, type SafeHtml } from '../html/markup.js';
import type { PageSection } from '../html/page.js';
import { renderSvg, svgWidth } from '../html/render-svg.js';
import { FONT_STACK } from '../html/chart-specs.js';
import { shortLayerLabels } from '../layer-labels.js';
import type { PairPictureData } from './pair-pictures.js';
import { mapPicture, stimulusPicture } from './raster.js';

const CONFIG = { font: FONT_STACK, background: 'white', padding: 6, view: { stroke: '#d5d9de' }, axis: { labelFontSize: 11, titleFontSize: 12, titleFontWeight: 600, gridColor: '#eceef1' }, legend: { labelFontSize: 11, titleFontSize: 12 }, header: { labelFontSize: 12, labelFontWeight: 600 } } as const;

function rocSpec(data: PairPictureData['roc']): TopLevelSpec {
  const rows = data.flatMap((r) => [
    ...r.base.map((p, i) => ({ category: `${r.category} (AUC ${r.baseAuc.toFixed(3)} → ${r.modAuc.toFixed(3)})`, run: 'baseline', order: i, far: p.falseAlarmRate, hit: p.hitRate })),
    ...r.mod.map((p, i) => ({ category: `${r.category} (AUC ${r.baseAuc.toFixed(3)} → ${r.modAuc.toFixed(3)})`, run: 'modulated', order: i, far: p.falseAlarmRate, hit: p.hitRate })),
  ]);
  return {
    config: CONFIG,
    data: { values: rows },
    columns: Math.min(2, data.length),
    facet: { field: 'category', type: 'nominal', header: { title: null } },
    spec: {
      width: 220,
      height: 220,
      layer: [
        { data: { values: [{ far: 0, hit: 0 }, { far: 1, hit: 1 }] }, mark: { type: 'line', color: '#999', strokeDash: [4, 3], strokeWidth: 1 }, encoding: { x: { field: 'far', type: 'quantitative' }, y: { field: 'hit', type: 'quantitative' } } },
        {
          mark: { type: 'line', strokeWidth: 2, interpolate: 'linear' },
          encoding: {
            x: { field: 'far', type: 'quantitative', title: 'false-alarm rate', scale: { domain: [0, 1], nice: false } },
            y: { field: 'hit', type: 'quantitative', title: 'hit rate', scale: { domain: [0, 1], nice: false } },
            order: { field: 'order', type: 'quantitative' },
            color: { field: 'run', type: 'nominal', scale: { domain: ['baseline', 'modulated'], range: ['#4e79a7', '#e15759'] }, legend: { title: null, orient: 'bottom' } },
          },
        },
      ],
    },
  } as TopLevelSpec;
}

function signatureSpec(data: PairPictureData['signature'], label: (name: string) => string): TopLevelSpec {
  const points = data.flatMap((s) => s.rank.map((rank, c) => ({ layer: label(s.layer), rank, ratio: s.ratio[c]! })).filter((p) => Number.isFinite(p.rank) && Number.isFinite(p.ratio)));
  const lines = data.flatMap((s) => (Number.isFinite(s.slope) ? [{ layer: label(s.layer), rank: 0, ratio: s.intercept }, { layer: label(s.layer), rank: 1, ratio: s.intercept + s.slope }] : []));
  const order = data.map((s) => label(s.layer));
  return {
    config: CONFIG,
    columns: Math.min(3, data.length),
    data: { values: [...points.map((p) => ({ ...p, part: 'channel' })), ...lines.map((p) => ({ ...p, part: 'fit' }))] },
    facet: { field: 'layer', type: 'nominal', sort: order, header: { title: null } },
    spec: {
      width: 200,
      height: 170,
      layer: [
        { mark: { type: 'rule', color: '#777', strokeDash: [3, 3] }, encoding: { y: { datum: 1, type: 'quantitative' } } },
        { transform: [{ filter: "datum.part === 'channel'" }], mark: { type: 'point', filled: true, size: 22, opacity: 0.7, color: '#4e79a7' }, encoding: { x: { field: 'rank', type: 'quantitative', title: 'tuning rank (0 = most preferring)' }, y: { field: 'ratio', type: 'quantitative', title: 'activity ratio mod ÷ base', scale: { zero: false } } } },
        { transform: [{ filter: "datum.part === 'fit'" }], mark: { type: 'line', color: '#e15759', strokeWidth: 2 }, encoding: { x: { field: 'rank', type: 'quantitative' }, y: { field: 'ratio', type: 'quantitative' } } },
      ],
    },
  } as TopLevelSpec;
}

function spatialSpec(data: NonNullable<PairPictureData['spatialProfile']>, label: (name: string) => string): TopLevelSpec {
  const rows = data.flatMap((l) => l.rings.filter((r) => Number.isFinite(r.relativeChange) && r.relativeChange > 0).map((r) => ({ layer: label(l.layer), distance: (r.from + r.to) / 2, value: r.relativeChange })));
  return {
    config: CONFIG,
    width: 360,
    height: 220,
    data: { values: rows },
    mark: { type: 'line', strokeWidth: 2, point: { filled: true, size: 24 } },
    encoding: {
      x: { field: 'distance', type: 'quantitative', title: 'distance from the window centre (map widths)' },
      y: { field: 'value', type: 'quantitative', scale: { type: 'log' }, title: 'relative change ‖mod − base‖ / ‖base‖', axis: { format: '~g' } },
      color: { field: 'layer', type: 'nominal', sort: data.map((l) => label(l.layer)), legend: { title: 'layer', orient: 'right' } },
    },
  } as TopLevelSpec;
}

/** Options of `pairPictureSections`. */
export interface PairSectionOptions {
  /** Prefix of section and chart ids (unique in the page). */
  idPrefix: string;
  /** Heading suffix naming the pair (e.g. its run label). */
  title: string;
}

/**
 * The sections of one pair's pictures (empty kinds are left out, each with a note saying why).
 * @param data from `pairPictureData`.
 * @param options id prefix and title.
 * @returns the sections, the picture kinds drawn, and rendering warnings.
 * @throws RuntimeFailure when a chart cannot be rendered.
 */
export async function pairPictureSections(data: PairPictureData, options: PairSectionOptions): Promise<{ sections: PageSection[]; kinds: string[]; warnings: string[] }> {
  const kinds: string[] = [];
  const warnings: string[] = [];
  const names = shortLayerLabels([...data.featureMaps.map((m) => m.layer), ...data.signature.map((s) => s.layer), ...(data.spatialProfile ?? []).map((s) => s.layer)]);
  const label = (name: string) => names.get(name) ?? name;
  let chartCount = 0;
  const chart = async (kind: string, spec: TopLevelSpec, caption: string): Promise<SafeHtml> => {
    const id = `${options.idPrefix}-chart${++chartCount}`;
    const rendered = await renderSvg(spec, id);
    for (const w of rendered.warnings) warnings.push(`${id}: ${w}`);
    kinds.push(kind);
    return html`<figure class="chart" id="${id}" data-picture="${kind}" style="--chart-width: ${svgWidth(rendered.svg)}px">${rendered.svg}<figcaption>${caption}</figcaption></figure>`;
  };
  const parts: SafeHtml[] = [];

  if (data.stimuli.length > 0) {
    const figures: SafeHtml[] = [];
    for (const s of data.stimuli) {
      const picture = await stimulusPicture(s.pixels, s.height, s.width, Math.max(1, Math.round(96 / s.width)));
      figures.push(html`<figure><img class="raster" src="${picture.uri}" width="${picture.width}" height="${picture.height}" alt="stimulus ${s.index}, labelled ${s.category}"><figcaption>${s.category} (#${s.index})</figcaption></figure>`);
    }
    kinds.push('stimuli');
    parts.push(html`<h3>Example stimuli</h3><div class="pictures" data-picture="stimuli">${figures}</div><p class="note">The first display labelled with each category, as recorded (each picture stretched to its own range).</p>`);
  }

  if (data.featureMaps.length > 0) {
    const rows: SafeHtml[] = [];
    for (const m of data.featureMaps) {
      let high = Number.NEGATIVE_INFINITY;
      let low = Number.POSITIVE_INFINITY;
      let largest = 0;
      for (let p = 0; p < m.base.length; p++) {
        high = Math.max(high, m.base[p]!, m.mod[p]!);
        low = Math.min(low, m.base[p]!, m.mod[p]!);
        largest = Math.max(largest, Math.abs(m.mod[p]! - m.base[p]!));
      }
      const difference = m.mod.map((v, p) => v - m.base[p]!);
      const outline = data.window;
      const a = await mapPicture(m.base, m.height, m.width, { scale: 'activity', range: [low, high], outline });
      const b = await mapPicture(m.mod, m.height, m.width, { scale: 'activity', range: [low, high], outline });
      const d = await mapPicture(difference, m.height, m.width, { scale: 'difference', range: [0, largest], outline });
      const cell = (p: { uri: string; width: number; height: number }, caption: string) => html`<figure><img class="raster" src="${p.uri}" width="${p.width}" height="${p.height}" alt="${caption}"><figcaption>${caption}</figcaption></figure>`;
      rows.push(html`<h3><span title="${m.layer}">${label(m.layer)}</span> <span class="note">(${m.height}×${m.width}, stimulus #${m.stimulus})</span></h3><div class="pictures">${cell(a, 'baseline')}${cell(b, 'modulated')}${cell(d, `modulated − baseline (±${largest.toPrecision(2)})`)}</div>`);
    }
    kinds.push('feature-maps');
    parts.push(html`<div data-picture="feature-maps">${rows}</div><p class="note">Mean over channels at each map position; baseline and modulated share one colour scale (viridis, ${data.featureMaps.length > 0 ? 'low to high' : ''}); the difference is blue (lower) to red (higher), white unchanged.${data.window ? ` Outline: the modulation window (${data.window.shape === 'box' ? 'its box' : 'its 1σ circle'}).` : ''}</p>`);
  }

  if (data.roc.length > 0) parts.push(html`<h3>ROC curves of the readout</h3>${await chart('roc', rocSpec(data.roc), 'Hit rate against false-alarm rate over every threshold of the readout unit, baseline (blue) and modulated (red); dashed: chance. A curve further up and left detects better at every criterion; a move along the same curve is a criterion shift.')}`);
  if (data.signature.length > 0) parts.push(html`<h3>Signature: activity ratio against tuning rank${data.target ? html` for “${data.target}”` : ''}</h3>${await chart('signature', signatureSpec(data.signature, label), 'One point per channel: modulated ÷ baseline mean activity against the channel\u2019s tuning rank for the attended category (0 = prefers it most); red: least-squares line; dashed: no change. Feature-similarity gain shows as a line above 1 on the left falling to the right.')}`);
  if (data.spatialProfile && data.spatialProfile.length > 0) parts.push(html`<h3>Spatial profile of the change</h3>${await chart('spatial-profile', spatialSpec(data.spatialProfile, label), `Relative change within rings of equal distance from the window\u2019s centre (map-relative units), per layer at or below the site, over the first ${Math.max(...data.spatialProfile.map((s) => s.stimuli))} stimuli: how far the windowed change spreads as it travels down.`)}`);
  else if (!data.window) parts.push(html`<p class="note">No spatial profile: this modulation has no window (it acts on the whole map).</p>`);

  const sections: PageSection[] = parts.length === 0 ? [] : [{ id: `${options.idPrefix}`, heading: `Pictures: ${options.title}`, body: html`${parts}` }];
  return { sections, kinds: [...new Set(kinds)], warnings };
}
