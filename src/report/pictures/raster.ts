/**
 * Small raster pictures for the report, as PNG `data:` URIs encoded by sharp: feature maps through a
 * colour map (viridis for activity, a blue–white–red diverging map for differences, symmetric about 0),
 * RGB stimuli, each enlarged by an integer factor with nearest-neighbour pixels (a unit stays one square),
 * and an optional window outline drawn into the pixels (a box's edges, or a Gaussian window's 1σ circle).
 */
import sharp from 'sharp';

/** Viridis control points (matplotlib's viridis at 0, 0.25, 0.5, 0.75, 1; common practice). */
const VIRIDIS: ReadonlyArray<readonly [number, number, number]> = [[68, 1, 84], [59, 82, 139], [33, 145, 140], [94, 201, 98], [253, 231, 37]];

function viridis(t: number): [number, number, number] {
  const x = Math.max(0, Math.min(1, Number.isFinite(t) ? t : 0)) * (VIRIDIS.length - 1);
  const i = Math.min(VIRIDIS.length - 2, Math.floor(x));
  const f = x - i;
  const a = VIRIDIS[i]!;
  const b = VIRIDIS[i + 1]!;
  return [a[0] + f * (b[0] - a[0]), a[1] + f * (b[1] - a[1]), a[2] + f * (b[2] - a[2])];
}

/** Diverging map for t in [−1, 1]: blue (−1) – white (0) – red (+1). */
function diverging(t: number): [number, number, number] {
  const x = Math.max(-1, Math.min(1, Number.isFinite(t) ? t : 0));
  return x < 0 ? [255 + x * (255 - 49), 255 + x * (255 - 104), 255 + x * (255 - 189)] : [255 - x * (255 - 202), 255 - x * (255 - 0), 255 - x * (255 - 32)];
}

/** A window outline in map-relative coordinates (as in modulation specs). */
export type Outline = { shape: 'box'; x0: number; x1: number; y0: number; y1: number } | { shape: 'gaussian'; cx: number; cy: number; sigma: number };

/** Options of `mapPicture`. */
export interface MapPictureOptions {
  /** `activity`: viridis from `range[0]` to `range[1]`; `difference`: diverging, ±`range[1]`. */
  scale: 'activity' | 'difference';
  range: [number, number];
  /** Enlargement (pixels per map position, default: so that the picture is about 160 px wide). */
  factor?: number;
  outline?: Outline | null;
}

/** Draws the outline into an RGB buffer of `width` × `height` pixels (black with a white halo). */
function drawOutline(rgb: Uint8Array, width: number, height: number, outline: Outline): void {
  const set = (x: number, y: number, value: number) => {
    if (x < 0 || y < 0 || x >= width || y >= height) return;
    const i = (y * width + x) * 3;
    rgb[i] = value;
    rgb[i + 1] = value;
    rgb[i + 2] = value;
  };
  if (outline.shape === 'box') {
    const x0 = Math.round(outline.x0 * width);
    const x1 = Math.round(outline.x1 * width) - 1;
    const y0 = Math.round(outline.y0 * height);
    const y1 = Math.round(outline.y1 * height) - 1;
    for (let x = x0; x <= x1; x++) for (const [y, v] of [[y0, 0], [y1, 0], [y0 - 1, 255], [y1 + 1, 255]] as const) set(x, y, v);
    for (let y = y0; y <= y1; y++) for (const [x, v] of [[x0, 0], [x1, 0], [x0 - 1, 255], [x1 + 1, 255]] as const) set(x, y, v);
    return;
  }
  const steps = 720;
  for (let s = 0; s < steps; s++) {
    const angle = (2 * Math.PI * s) / steps;
    const x = (outline.cx + outline.sigma * Math.cos(angle)) * width;
    const y = (outline.cy + outline.sigma * Math.sin(angle)) * height;
    set(Math.round(x + 1), Math.round(y), 255);
    set(Math.round(x), Math.round(y), 0);
  }
}

async function encode(rgb: Uint8Array, width: number, height: number): Promise<string> {
  const png = await sharp(Buffer.from(rgb.buffer, rgb.byteOffset, rgb.byteLength), { raw: { width, height, channels: 3 } }).png({ compressionLevel: 9 }).toBuffer();
  return `data:image/png;base64,${png.toString('base64')}`;
}

/**
 * A map [H, W] (row-major) as a PNG data URI.
 * @param map the values; @param height H; @param width W; @param options colour scale, range, factor, outline.
 * @returns the URI and the picture's pixel size.
 */
export async function mapPicture(map: ArrayLike<number>, height: number, width: number, options: MapPictureOptions): Promise<{ uri: string; width: number; height: number }> {
  const factor = options.factor ?? Math.max(1, Math.round(160 / width));
  const w = width * factor;
  const h = height * factor;
  const rgb = new Uint8Array(w * h * 3);
  const [low, high] = options.range;
  for (let i = 0; i < height; i++) {
    for (let j = 0; j < width; j++) {
      const v = map[i * width + j]!;
      const colour = options.scale === 'activity' ? viridis(high > low ? (v - low) / (high - low) : 0) : diverging(high > 0 ? v / high : 0);
      for (let dy = 0; dy < factor; dy++) {
        for (let dx = 0; dx < factor; dx++) {
          const p = ((i * factor + dy) * w + j * factor + dx) * 3;
          rgb[p] = colour[0];
          rgb[p + 1] = colour[1];
          rgb[p + 2] = colour[2];
        }
      }
    }
  }
  if (options.outline) drawOutline(rgb, w, h, options.outline);
  return { uri: await encode(rgb, w, h), width: w, height: h };
}

/**
 * An RGB stimulus [3, H, W] (planar, any value range) as a PNG data URI, each picture stretched to its
 * own minimum and maximum (so normalised inputs display as images).
 * @param pixels the stimulus; @param height H; @param width W; @param factor enlargement (default 2).
 */
export async function stimulusPicture(pixels: ArrayLike<number>, height: number, width: number, factor = 2): Promise<{ uri: string; width: number; height: number }> {
  let low = Number.POSITIVE_INFINITY;
  let high = Number.NEGATIVE_INFINITY;
  for (let i = 0; i < 3 * height * width; i++) {
    const v = pixels[i]!;
    if (v < low) low = v;
    if (v > high) high = v;
  }
  const span = high > low ? high - low : 1;
  const w = width * factor;
  const h = height * factor;
  const rgb = new Uint8Array(w * h * 3);
  const plane = height * width;
  for (let i = 0; i < height; i++) {
    for (let j = 0; j < width; j++) {
      for (let c = 0; c < 3; c++) {
        const v = Math.round((255 * (pixels[c * plane + i * width + j]! - low)) / span);
        for (let dy = 0; dy < factor; dy++) for (let dx = 0; dx < factor; dx++) rgb[((i * factor + dy) * w + j * factor + dx) * 3 + c] = v;
      }
    }
  }
  return { uri: await encode(rgb, w, h), width: w, height: h };
}
