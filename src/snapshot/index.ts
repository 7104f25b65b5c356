export * from './manifest.js';
export * from './layer-file.js';
export * from './stimuli-file.js';
export * from './snapshot.js';
export { float16ToFloat32, float32ToFloat16, fromFloat16Bits, toFloat16Bits } from './float16.js';
