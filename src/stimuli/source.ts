import { createHash } from 'node:crypto';
import { existsSync, readdirSync, readFileSync, statSync } from 'node:fs';
import { basename, dirname, extname, join, relative, resolve } from 'node:path';
import sharp from 'sharp';
import { RuntimeFailure, UsageError } from '../errors.js';
import { assertRegularFile } from '../disk/input-file.js';
import { parseNpy } from './npy.js';
import { pixelsToPlanar, type Preprocessing } from './preprocess.js';

/** Image file extensions read from class folders. */
export const IMAGE_EXTENSIONS: ReadonlySet<string> = new Set(['.png', '.jpg', '.jpeg', '.webp', '.gif', '.tif', '.tiff', '.bmp', '.avif']);

/** A finite, ordered set of stimuli that can be read batch by batch as network input. */
export interface StimulusSource {
  /** One line saying where the stimuli come from (for manifests). */
  description: string;
  /** `folder`, `csv` or `npy`. */
  kind: 'folder' | 'csv' | 'npy';
  count: number;
  /** Per stimulus: path relative to the source, or the row number for arrays. */
  ids: string[];
  /** Per stimulus: the categories present (empty when unlabelled). */
  labels: string[][];
  /** Channels, height, width of one stimulus as fed to the network. */
  shape: [number, number, number];
  /**
   * Writes stimuli [start, start + rows) as NCHW float32 into `out` (length ≥ rows·C·H·W).
   * @throws UsageError naming the file when an image cannot be decoded.
   */
  read(start: number, rows: number, out: Float32Array): Promise<void>;
}

/** Options of `openStimulusSource`. */
export interface StimulusSourceOptions {
  /** Preprocessing for images; `.npy` arrays are used as-is. */
  preprocessing: Preprocessing;
  /** Channels the model expects (1 or 3 for images). */
  channels: number;
  /** A CSV with one `label` column, row order (only for `.npy` sources). */
  labelsFile?: string;
}

/**
 * Opens a stimulus source: a folder with one subfolder per category holding images, a CSV manifest
 * with header `path,label` (several categories as `a;b`; paths relative to the CSV), or a float32 `.npy`
 * array [N,C,H,W] used as-is (labels from `labelsFile`).
 * @throws UsageError for a missing or empty source, a malformed CSV, or an array of the wrong shape.
 */
export function openStimulusSource(path: string, options: StimulusSourceOptions): StimulusSource {
  const absolute = resolve(path);
  if (!existsSync(absolute)) throw new UsageError('E_STIMULI_MISSING', `--stimuli ${path} does not exist`);
  const stat = statSync(absolute);
  if (stat.isDirectory()) return openFolder(path, absolute, options);
  assertRegularFile(absolute, `--stimuli ${path}`); // a FIFO or device would block or never end
  const extension = extname(absolute).toLowerCase();
  if (extension === '.csv') return openCsv(path, absolute, options);
  if (extension === '.npy') return openNpy(path, absolute, options);
  throw new UsageError('E_STIMULI_KIND', `--stimuli ${path} is neither a folder, a .csv manifest nor a .npy array`);
}

/**
 * Refuses a folder entry whose name is not valid UTF-8: Node decodes it with U+FFFD replacements, so
 * the decoded name names no file (reading it fails) and would be stored as a wrong stimulus id.
 * @throws UsageError naming the folder, the name's bytes and the fix.
 */
function assertUtf8Entries(folder: string, option: string): void {
  for (const raw of readdirSync(folder, { encoding: 'buffer' })) {
    const text = raw.toString('utf8');
    if (!Buffer.from(text, 'utf8').equals(raw)) {
      throw new UsageError('E_STIMULI_NAME', `${option}: an entry of ${folder} has a name that is not valid UTF-8 (${JSON.stringify(text)}, bytes ${raw.toString('hex')})`, { hint: 'rename it (e.g. with convmv, or by hand)' });
    }
  }
}

/**
 * Reads a text file that must be UTF-8 (a byte-order mark is dropped).
 * @throws UsageError naming the file and the byte offset of the first invalid sequence.
 */
export function readUtf8File(path: string, what: string): string {
  if (existsSync(path)) assertRegularFile(path, what);
  const bytes = readFileSync(path);
  try {
    return new TextDecoder('utf-8', { fatal: true, ignoreBOM: false }).decode(bytes);
  } catch {
    const text = bytes.toString('utf8');
    const at = Buffer.from(text.slice(0, text.indexOf('\uFFFD')), 'utf8').length;
    throw new UsageError('E_STIMULI_CSV', `${what} is not valid UTF-8 (first invalid byte near offset ${at})`, { hint: 'save it as UTF-8' });
  }
}

function openFolder(path: string, absolute: string, options: StimulusSourceOptions): StimulusSource {
  assertUtf8Entries(absolute, `--stimuli ${path}`);
  const categories = readdirSync(absolute, { withFileTypes: true }).filter((e) => e.isDirectory()).map((e) => e.name).sort();
  const files: string[] = [];
  const labels: string[][] = [];
  for (const category of categories) {
    assertUtf8Entries(join(absolute, category), `--stimuli ${path}`);
    const entries = readdirSync(join(absolute, category), { withFileTypes: true })
      .filter((e) => e.isFile() && IMAGE_EXTENSIONS.has(extname(e.name).toLowerCase()))
      .map((e) => e.name)
      .sort();
    for (const name of entries) {
      files.push(join(absolute, category, name));
      labels.push([category]);
    }
  }
  if (categories.length === 0) {
    const loose = readdirSync(absolute).filter((n) => IMAGE_EXTENSIONS.has(extname(n).toLowerCase()));
    if (loose.length > 0) {
      throw new UsageError('E_STIMULI_EMPTY', `--stimuli ${path} holds images but no category subfolders`, { hint: 'put images in one subfolder per category, or list them in a path,label CSV' });
    }
  }
  if (files.length === 0) throw new UsageError('E_STIMULI_EMPTY', `--stimuli ${path} holds no images (expected one subfolder per category with ${[...IMAGE_EXTENSIONS].slice(0, 3).join('/')} files)`);
  return imageSource('folder', `image folder ${path} (${categories.length} categories)`, absolute, files, labels, options);
}

function openCsv(path: string, absolute: string, options: StimulusSourceOptions): StimulusSource {
  const rows = parseCsv(readUtf8File(absolute, path), path);
  const header = rows.shift();
  if (!header || header[0] !== 'path' || header[1] !== 'label') {
    throw new UsageError('E_STIMULI_CSV', `${path}: the first line must be the header "path,label", got "${(header ?? []).join(',')}"`);
  }
  if (rows.length === 0) throw new UsageError('E_STIMULI_EMPTY', `${path} lists no stimuli`);
  const folder = dirname(absolute);
  const files: string[] = [];
  const labels: string[][] = [];
  rows.forEach((row, i) => {
    const file = row[0] ?? '';
    if (file === '') throw new UsageError('E_STIMULI_CSV', `${path}: line ${i + 2} has an empty path`);
    files.push(resolve(folder, file));
    labels.push(splitLabels(row[1] ?? ''));
  });
  return imageSource('csv', `CSV manifest ${path}`, folder, files, labels, options);
}

function openNpy(path: string, absolute: string, options: StimulusSourceOptions): StimulusSource {
  const tensor = parseNpy(readFileSync(absolute), path);
  if (tensor.descr !== '<f4') throw new UsageError('E_STIMULI_NPY', `${path} holds ${tensor.descr} values; Sonde reads float32 arrays`, { hint: 'save with arr.astype(np.float32)' });
  if (tensor.shape.length !== 4) throw new UsageError('E_STIMULI_NPY', `${path} has shape [${tensor.shape.join(', ')}]; expected [N, C, H, W]`);
  const [n, c, h, w] = tensor.shape as [number, number, number, number];
  if (n === 0) throw new UsageError('E_STIMULI_EMPTY', `${path} holds 0 stimuli`);
  if (c !== options.channels) throw new UsageError('E_STIMULI_SHAPE', `${path} has ${c} channels but the model input has ${options.channels}`);
  const [height, width] = options.preprocessing.size;
  if (h !== height || w !== width) throw new UsageError('E_STIMULI_SHAPE', `${path} holds ${h}x${w} arrays but the model input is ${height}x${width}`, { hint: 'resize the array, or pass --input-shape for a model with free spatial axes' });
  let labels: string[][] = new Array(n).fill(null).map(() => []);
  if (options.labelsFile) {
    const rows = parseCsv(readUtf8File(resolve(options.labelsFile), `--labels ${options.labelsFile}`), options.labelsFile);
    const header = rows.shift();
    if (!header || header[0] !== 'label' || header.length !== 1) {
      throw new UsageError('E_STIMULI_CSV', `--labels ${options.labelsFile}: the first line must be the header "label"`);
    }
    if (rows.length !== n) {
      throw new UsageError('E_STIMULI_CSV', `--labels ${options.labelsFile} has ${rows.length} rows but ${path} holds ${n} stimuli`, { hint: 'one row per stimulus; a stimulus without labels is a row "" (blank lines are skipped)' });
    }
    labels = rows.map((r) => splitLabels(r[0] ?? ''));
  }
  const data = tensor.data as Float32Array;
  const per = c * h * w;
  return {
    description: `array ${path}${options.labelsFile ? ` with labels ${options.labelsFile}` : ''}`,
    kind: 'npy',
    count: n,
    ids: Array.from({ length: n }, (_, i) => String(i)),
    labels,
    shape: [c, h, w],
    async read(start, rows, out) {
      out.set(data.subarray(start * per, (start + rows) * per), 0);
    },
  };
}

function imageSource(kind: 'folder' | 'csv', description: string, root: string, files: string[], labels: string[][], options: StimulusSourceOptions): StimulusSource {
  const [height, width] = options.preprocessing.size;
  const channels = options.channels;
  if (channels !== 1 && channels !== 3) {
    throw new UsageError('E_STIMULI_SHAPE', `the model input has ${channels} channels; images can feed 1 (grey) or 3 (RGB) channels`, { hint: 'pass a .npy array instead' });
  }
  const per = channels * height * width;
  return {
    description,
    kind,
    count: files.length,
    ids: files.map((f) => relative(root, f).split('\\').join('/')),
    labels,
    shape: [channels, height, width],
    async read(start, rows, out) {
      await Promise.all(
        files.slice(start, start + rows).map(async (file, i) => {
          let decoded: { data: Buffer; info: { channels: number } };
          if (existsSync(file)) assertRegularFile(file, `stimulus ${relative(process.cwd(), file) || basename(file)}`); // a FIFO would hang the decoder
          try {
            let image = sharp(file, { failOn: 'error' }).removeAlpha();
            image = channels === 1 ? image.greyscale() : image.toColourspace('srgb');
            decoded = await image.resize(width, height, { fit: 'fill' }).raw().toBuffer({ resolveWithObject: true });
          } catch (error) {
            const code = (error as NodeJS.ErrnoException).code;
            if (code === 'ENOENT' || !existsSync(file)) throw new UsageError('E_STIMULI_MISSING', `stimulus ${relative(process.cwd(), file) || basename(file)} does not exist`);
            throw new UsageError('E_STIMULI_DECODE', `cannot decode image ${relative(process.cwd(), file) || basename(file)}: ${(error as Error).message.split('\n')[0]}`);
          }
          if (decoded.info.channels !== channels) {
            throw new RuntimeFailure('E_STIMULI_DECODE', `image ${basename(file)} decoded to ${decoded.info.channels} channels, expected ${channels}`);
          }
          pixelsToPlanar(new Uint8Array(decoded.data.buffer, decoded.data.byteOffset, decoded.data.length), height, width, channels, options.preprocessing, out, i * per);
        }),
      );
    },
  };
}

/** Splits a label cell on `;` into trimmed non-empty categories. */
export function splitLabels(cell: string): string[] {
  return cell.split(';').map((s) => s.trim()).filter((s) => s.length > 0);
}

/**
 * A small RFC 4180 CSV parser (quoted fields, doubled quotes, CRLF). Blank lines are dropped; a line
 * holding only `""` is a row with one empty field (how Python's csv module writes a lone empty value,
 * so it is not a blank line), e.g. a stimulus without labels in a `label` column.
 */
export function parseCsv(text: string, source: string): string[][] {
  const rows: string[][] = [];
  let field = '';
  let row: string[] = [];
  let quoted = false;
  let rowQuoted = false;
  for (let i = 0; i < text.length; i++) {
    const ch = text[i]!;
    if (quoted) {
      if (ch === '"') {
        if (text[i + 1] === '"') {
          field += '"';
          i++;
        } else quoted = false;
      } else field += ch;
    } else if (ch === '"' && field === '') {
      quoted = true;
      rowQuoted = true;
    }
    else if (ch === ',') {
      row.push(field);
      field = '';
    } else if (ch === '\n' || ch === '\r') {
      if (ch === '\r' && text[i + 1] === '\n') i++;
      row.push(field);
      if (row.length > 1 || row[0] !== '' || rowQuoted) rows.push(row);
      row = [];
      field = '';
      rowQuoted = false;
    } else field += ch;
  }
  if (quoted) throw new UsageError('E_STIMULI_CSV', `${source}: unterminated quoted field`);
  row.push(field);
  if (row.length > 1 || row[0] !== '' || rowQuoted) rows.push(row);
  return rows.map((r) => r.map((f) => f.trim()));
}

/** SHA-256 over ids and labels, in order: identifies a stimulus listing without reading pixels. */
export function listingDigest(source: Pick<StimulusSource, 'ids' | 'labels'>): string {
  const hash = createHash('sha256');
  source.ids.forEach((id, i) => hash.update(`${id}\t${source.labels[i]!.join(';')}\n`));
  return hash.digest('hex');
}
