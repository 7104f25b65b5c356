import { createHash } from 'node:crypto';
import { closeSync, existsSync, openSync, readdirSync, readFileSync, readSync, statSync, type Dirent } from 'node:fs';
import { basename, dirname, extname, join, relative, resolve } from 'node:path';
import { RuntimeFailure, UsageError } from '../errors.js';
import { assertRegularFile, INPUT_LIMITS, readInputFile } from '../disk/input-file.js';
import { parseNpy, readNpyHeader } from './npy.js';
import { pixelsToPlanar, resolvedFit, type PixelBlock, type Preprocessing } from './preprocess.js';
import { decodeImage } from './decode.js';
import { labelsFilesBeside, labelsFilesIn, type FoundLabels } from './labels-file.js';

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
  /** Per stimulus: the absolute path of the image file (image sources only). */
  files?: string[];
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
  /**
   * For a `.npy` source: a CSV with one `label` column, row order (default: a labels file beside the
   * array, see `labelsFilesBeside`), or `none` to record it without labels. For a folder: a `path,label`
   * CSV to read it through (default: the labels file in the folder, if any), or `folders` to label by
   * subfolder and ignore labels files.
   */
  labelsFile?: string;
  /** Receives one-line notices (a class-folder tree with a single category). The labels file a source was read through is named in its `description`. */
  onNotice?: (text: string) => void;
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
  const bytes = readInputFile(path, what, INPUT_LIMITS.listing);
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
  const labelsFile = options.labelsFile;
  if (labelsFile === 'none') throw new UsageError('E_STIMULI_LABELS', `--labels none is for .npy arrays; the labels of folder ${path} come from its subfolders or its labels file`, { hint: 'drop --labels, or pass --labels folders to label by subfolder' });
  if (labelsFile !== undefined && labelsFile !== 'folders') return openCsv(labelsFile, resolve(labelsFile), options, `--labels ${labelsFile}`);
  if (labelsFile === undefined) {
    const through = folderLabelsFile(path, absolute);
    if (through) {
      if (through.role === 'rows') return openNpy(through.npy!, resolve(through.npy!), { ...options, labelsFile: through.path });
      return openCsv(through.path, through.path, options);
    }
  }
  const entries = readdirSync(absolute, { withFileTypes: true });
  const categories = entries.filter((e) => e.isDirectory()).map((e) => e.name).sort();
  const files: string[] = [];
  const labels: string[][] = [];
  for (const category of categories) {
    assertUtf8Entries(join(absolute, category), `--stimuli ${path}`);
    const images = readdirSync(join(absolute, category), { withFileTypes: true })
      .filter((e) => e.isFile() && IMAGE_EXTENSIONS.has(extname(e.name).toLowerCase()))
      .map((e) => e.name)
      .sort();
    for (const name of images) {
      files.push(join(absolute, category, name));
      labels.push([category]);
    }
  }
  const loose = entries.filter((e) => isImageEntry(e)).map((e) => e.name).sort();
  if (loose.length > 0) {
    const what = categories.length === 0 ? 'holds images but no category subfolders' : `holds ${loose.length} image(s) outside its category subfolders (${loose.slice(0, 3).join(', ')}${loose.length > 3 ? ', …' : ''}), which would have no label`;
    throw new UsageError('E_STIMULI_EMPTY', `--stimuli ${path} ${what}`, { hint: 'put images in one subfolder per category, or list them in a path,label CSV' });
  }
  if (files.length === 0) throw new UsageError('E_STIMULI_EMPTY', `--stimuli ${path} holds no images (expected one subfolder per category with ${[...IMAGE_EXTENSIONS].slice(0, 3).join('/')} files)`);
  const used = categories.filter((c) => labels.some((l) => l[0] === c));
  if (used.length === 1) {
    options.onNotice?.(`--stimuli ${path} has a single category subfolder "${used[0]}": every stimulus is labelled ${used[0]}, so a detection task has no stimuli without it (if the images hold several categories, list them in a path,label CSV)`);
  }
  return imageSource('folder', `image folder ${path} (${used.length} categories)`, absolute, files, labels, options);
}

function isImageEntry(entry: Dirent): boolean {
  return entry.isFile() && IMAGE_EXTENSIONS.has(extname(entry.name).toLowerCase());
}

/**
 * The labels file a folder is read through, or null when it holds none (then it is read by subfolder).
 * @throws UsageError, one line saying what to pass, when the folder holds several labels files, one in
 *   a form Sonde does not read, a row-order list without exactly one array beside it, or a listing that
 *   leaves images of the folder out.
 */
function folderLabelsFile(path: string, absolute: string): (FoundLabels & { npy?: string }) | null {
  const found = labelsFilesIn(absolute);
  if (found.length === 0) return null;
  const shown = (f: FoundLabels): string => join(path, basename(f.path));
  if (found.length > 1) {
    throw new UsageError('E_STIMULI_LABELS', `--stimuli ${path} holds ${found.length} labels files (${found.map((f) => basename(f.path)).join(', ')}); Sonde will not guess which one labels the stimuli`, { hint: `pass one as --stimuli, e.g. --stimuli ${shown(found[0]!)}, or --labels folders to label by subfolder` });
  }
  const file = found[0]!;
  if (file.role === 'foreign-labels') {
    throw new UsageError('E_STIMULI_LABELS', `--stimuli ${path} holds ${basename(file.path)} with header "${file.header}", a labels file Sonde does not read`, { hint: `give it the header path,label (paths relative to it, categories joined by ;) and pass --stimuli ${shown(file)}, or pass --labels folders to label by subfolder` });
  }
  if (file.role === 'rows') {
    const arrays = readdirSync(absolute).filter((n) => extname(n).toLowerCase() === '.npy').sort();
    if (arrays.length === 1 && !readdirSync(absolute, { withFileTypes: true }).some((e) => isImageEntry(e) || e.isDirectory())) return { ...file, npy: join(path, arrays[0]!) };
    throw new UsageError('E_STIMULI_LABELS', `--stimuli ${path} holds ${basename(file.path)}, a row-order label list (header "label") that says nothing about which image each row labels`, { hint: arrays.length > 0 ? `pass the array: --stimuli ${join(path, arrays[0]!)} --labels ${shown(file)}` : 'write a path,label CSV, or pass --labels folders to label by subfolder' });
  }
  // a listing: every image under the folder must be in it, or those left out would vanish silently
  const listed = new Set(parseCsv(readUtf8File(file.path, shown(file)), shown(file)).slice(1).map((row) => resolve(dirname(file.path), row[0] ?? '')));
  const missing = imagesUnder(absolute).filter((f) => !listed.has(f));
  if (missing.length > 0) {
    throw new UsageError('E_STIMULI_LABELS', `--stimuli ${path}: its labels file ${basename(file.path)} leaves out ${missing.length} image(s) of the folder (${missing.slice(0, 2).map((f) => relative(absolute, f)).join(', ')}${missing.length > 2 ? ', …' : ''})`, { hint: `pass --stimuli ${shown(file)} to record only the listed images, or --labels folders to label by subfolder` });
  }
  return file;
}

/** Every image file under `folder`, at any depth (links are not followed). */
function imagesUnder(folder: string): string[] {
  const out: string[] = [];
  const walk = (dir: string): void => {
    for (const entry of readdirSync(dir, { withFileTypes: true })) {
      if (entry.isDirectory()) walk(join(dir, entry.name));
      else if (isImageEntry(entry)) out.push(join(dir, entry.name));
    }
  };
  walk(folder);
  return out;
}

/**
 * The labels file of an array: `--labels` when given (`none`: no labels), else the one labels file
 * beside it.
 * @throws UsageError when several lie beside it, or one that is not a row-order `label` list.
 */
function npyLabelsFile(path: string, absolute: string, options: StimulusSourceOptions): string | null {
  if (options.labelsFile === 'none') return null;
  if (options.labelsFile === 'folders') throw new UsageError('E_STIMULI_LABELS', `--labels folders is for image folders; ${path} is an array`, { hint: 'pass a CSV with one "label" column, or --labels none' });
  if (options.labelsFile !== undefined) return options.labelsFile;
  const found = labelsFilesBeside(absolute);
  if (found.length === 0) return null;
  const shown = (f: FoundLabels): string => join(dirname(path), basename(f.path));
  const rows = found.filter((f) => f.role === 'rows');
  if (found.length > 1 || rows.length === 0) {
    throw new UsageError('E_STIMULI_LABELS', `--stimuli ${path} has ${found.map((f) => `${basename(f.path)} (header "${f.header}")`).join(', ')} beside it; Sonde will not guess whether ${found.length > 1 ? 'one of them labels' : 'it labels'} the array`, { hint: `pass --labels FILE (a CSV with one "label" column, one row per stimulus), e.g. --labels ${shown(rows[0] ?? found[0]!)}, or --labels none` });
  }
  return shown(rows[0]!);
}

function openCsv(path: string, absolute: string, options: StimulusSourceOptions, named = path): StimulusSource {
  if (!existsSync(absolute)) throw new UsageError('E_STIMULI_MISSING', `${named} does not exist`);
  assertRegularFile(absolute, named);
  const rows = parseCsv(readUtf8File(absolute, named), named);
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

/**
 * A float32 `.npy` stimulus array, read from its header first: dtype, shape, channels and size are
 * checked against the model before any data is read (a wrong 1.9 GB array is refused at once), the file
 * size must be exactly header + data, and stimuli are then read batch by batch with positioned reads —
 * never the whole file at once, so arrays beyond 2 GiB (Node's limit for one buffer) are read too.
 * Fortran-ordered arrays (rare) are reordered whole and must fit one buffer.
 */
function openNpy(path: string, absolute: string, options: StimulusSourceOptions): StimulusSource {
  const fileSize = assertRegularFile(absolute, `--stimuli ${path}`).size;
  const header = readNpyHeader(absolute, path);
  const descr = header.descr === '<u1' ? '|u1' : header.descr;
  if (descr !== '<f4') throw new UsageError('E_STIMULI_NPY', `${path} holds ${descr} values; Sonde reads float32 arrays`, { hint: 'save with arr.astype(np.float32)' });
  if (header.shape.length !== 4) throw new UsageError('E_STIMULI_NPY', `${path} has shape [${header.shape.join(', ')}]; expected [N, C, H, W]`);
  const [n, c, h, w] = header.shape as [number, number, number, number];
  if (n === 0) throw new UsageError('E_STIMULI_EMPTY', `${path} holds 0 stimuli`);
  if (c !== options.channels) throw new UsageError('E_STIMULI_SHAPE', `${path} has ${c} channels but the model input has ${options.channels}`);
  const [height, width] = options.preprocessing.size;
  if (h !== height || w !== width) throw new UsageError('E_STIMULI_SHAPE', `${path} holds ${h}x${w} arrays but the model input is ${height}x${width}`, { hint: 'resize the array, or pass --input-shape for a model with free spatial axes' });
  const per = c * h * w;
  const dataBytes = n * per * 4;
  const present = fileSize - header.dataStart;
  if (present < dataBytes) throw new UsageError('E_NPY', `${path}: data is truncated (shape [${header.shape.join(', ')}] needs ${dataBytes} bytes, file has ${present})`);
  if (present > dataBytes) throw new UsageError('E_NPY', `${path}: ${present - dataBytes} bytes follow the data that shape [${header.shape.join(', ')}] describes; the header and the data disagree`, { hint: 'save it again with numpy.save' });
  let labels: string[][] = new Array(n).fill(null).map(() => []);
  const labelsFile = npyLabelsFile(path, absolute, options);
  if (labelsFile) {
    const named = labelsFile === options.labelsFile ? `--labels ${labelsFile}` : `labels file ${labelsFile} (beside ${path})`;
    const rows = parseCsv(readUtf8File(resolve(labelsFile), named), labelsFile);
    const header = rows.shift();
    if (!header || header[0] !== 'label' || header.length !== 1) {
      throw new UsageError('E_STIMULI_CSV', `${named}: the first line must be the header "label"`);
    }
    if (rows.length !== n) {
      throw new UsageError('E_STIMULI_CSV', `${named} has ${rows.length} rows but ${path} holds ${n} stimuli`, { hint: 'one row per stimulus; a stimulus without labels is a row "" (blank lines are skipped)' });
    }
    labels = rows.map((r) => splitLabels(r[0] ?? ''));
  }
  let whole: Float32Array | null = null;
  if (header.fortranOrder) {
    if (fileSize > 2 ** 31 - 1) throw new UsageError('E_STIMULI_NPY', `${path} is Fortran-ordered and over 2 GiB; Sonde streams C-ordered arrays only`, { hint: 'save it with numpy.save(path, np.ascontiguousarray(arr))' });
    whole = parseNpy(readFileSync(absolute), path).data as Float32Array;
  }
  return {
    description: `array ${path}${labelsFile ? ` with labels ${labelsFile}` : ''}`,
    kind: 'npy',
    count: n,
    ids: Array.from({ length: n }, (_, i) => String(i)),
    labels,
    shape: [c, h, w],
    async read(start, rows, out) {
      if (whole) {
        out.set(whole.subarray(start * per, (start + rows) * per), 0);
        return;
      }
      // NPY data is little-endian '<f4', as this host's Float32Array
      const target = new Uint8Array(out.buffer, out.byteOffset, rows * per * 4);
      const fd = openSync(absolute, 'r');
      try {
        let done = 0;
        while (done < target.length) {
          const got = readSync(fd, target, done, target.length - done, header.dataStart + start * per * 4 + done);
          if (got <= 0) throw new RuntimeFailure('E_NPY', `${path} ended early while reading stimulus ${start} (it changed during the recording)`);
          done += got;
        }
      } finally {
        closeSync(fd);
      }
    },
  };
}

function imageSource(kind: 'folder' | 'csv', description: string, root: string, files: string[], labels: string[][], options: StimulusSourceOptions): StimulusSource {
  const [height, width] = options.preprocessing.size;
  const channels = options.channels;
  resolvedFit(options.preprocessing); // an unknown fit or kernel is refused before any image is read
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
    files,
    async read(start, rows, out) {
      await Promise.all(
        files.slice(start, start + rows).map(async (file, i) => {
          let decoded: PixelBlock;
          if (existsSync(file)) assertRegularFile(file, `stimulus ${relative(process.cwd(), file) || basename(file)}`); // a FIFO would hang the decoder
          try {
            decoded = await decodeImage(file, options.preprocessing, channels);
          } catch (error) {
            const code = (error as NodeJS.ErrnoException).code;
            if (code === 'ENOENT' || !existsSync(file)) throw new UsageError('E_STIMULI_MISSING', `stimulus ${relative(process.cwd(), file) || basename(file)} does not exist`);
            throw new UsageError('E_STIMULI_DECODE', `cannot decode image ${relative(process.cwd(), file) || basename(file)}: ${(error as Error).message.split('\n')[0]}`);
          }
          if (decoded.channels !== channels) {
            throw new RuntimeFailure('E_STIMULI_DECODE', `image ${basename(file)} decoded to ${decoded.channels} channels, expected ${channels}`);
          }
          pixelsToPlanar(decoded, options.preprocessing, out, i * per);
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
