/**
 * Public API of the modulation layer: spec files → validated specs → resolved per-site vectors →
 * the G and B tensors injected as `y = x * G + B`.
 */
export * from './types.js';
export { parseModulationSpec, loadModulationSpec, validateModulationSpec, specToObject, describeValue, type ParseSpecOptions } from './spec.js';
export { readValuesFile, parseValuesCsv, vectorFromNpy, VALUES_FILE_EXTENSIONS } from './values-file.js';
export { windowWeights } from './window.js';
export { windowLabel, tokensLabel, modulationWindows } from './label.js';
export { gainFromValues, normaliseAcrossCategories, topChannels, type GainFromValuesOptions } from './gain-pattern.js';
export { resolveModulations } from './resolve.js';
export { siteShapeOf, defaultSiteLayout, siteGeometry, gainInputDims, type SiteShapeOptions } from './site-shape.js';
export {
  fillModulationInputs,
  modulationInputs,
  identityInputs,
  inputShape,
  inputLength,
  type BatchRange,
  type ModulationInputs,
} from './inputs.js';
