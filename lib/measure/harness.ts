// Where the harness's C, assembly and linker scripts live: beside this module in the sources
// (lib/measure/harness), and there too when running from dist/ (the package ships lib/**/*.c|h|ld).
import path from 'node:path';
import { shippedPath } from '../util/shipped.js';

/** The harness folder (holds startup.c, trace.c, boot.c, semihost.c, the .ld files and plugin/). */
export const harnessDir = (): string => path.dirname(shippedPath('measure/harness/startup.c', 'the measuring harness sources'));

/** The harness's firmware sources, in link order. */
export const HARNESS_SOURCES = ['startup.c', 'trace.c', 'boot.c', 'semihost.c'] as const;
