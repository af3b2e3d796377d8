// Typed errors with the context a one-line message needs: which file, what, where.
export type ErrorKind = 'usage' | 'io' | 'decode' | 'graph' | 'shape' | 'cost' | 'runtime' | 'data';

/** What the library throws on bad input: `kind`, the `file` and `where` it concerns, and the CLI's one line (`line()`). */
export class OfframpError extends Error {
  constructor(readonly kind: ErrorKind, message: string, readonly file?: string, readonly where?: string) {
    super(message);
    this.name = 'OfframpError';
  }
  /** The one line the CLI prints. */
  line(): string {
    return [this.file, this.where, this.message].filter(Boolean).join(': ');
  }
}

export const usageError = (msg: string) => new OfframpError('usage', msg);
export const graphError = (msg: string, where?: string, file?: string) => new OfframpError('graph', msg, file, where);
export const shapeError = (msg: string, where?: string) => new OfframpError('shape', msg, undefined, where);
