// The Guarantee type lives with the certification math (lib/certify), low enough for the manifest
// (lib/split) to record it; the tuners import it from here.
export type { Guarantee } from '../certify/guarantee.js';
export { recordedGuarantee } from '../certify/guarantee.js';
