// How a chosen head's trials read: each kind with the MACs it would save per frame (heads/choose.ts).
import type { HeadTrial } from '../heads/choose.js';
import { si } from './units.js';

export const trialsText = (tried: HeadTrial[], sep: string): string =>
  tried.map((t) => `${t.head} ${si(Math.max(0, t.worth))}${t.tooLarge ? ' (more parameters than the layers it skips)' : ''}`).join(sep);
