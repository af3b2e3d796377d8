// Exit-policy math: pure functions over numbers and typed arrays, shared by the
// staged runner, the tuner and the C emitter.
export * from './scores.js';
export * from './distance.js';
export * from './overhead.js';
export * from './policy.js';
export * from './stream.js';
