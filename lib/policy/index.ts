// Exit-policy math: pure functions over numbers and typed arrays, shared by the
// staged runner, the tuner and the C emitter.
export { exp32, log32, sqrt32, nextUp32 } from './f32.js';
export * from './scores.js';
export * from './distance.js';
export * from './overhead.js';
export * from './policy.js';
export * from './stream.js';
