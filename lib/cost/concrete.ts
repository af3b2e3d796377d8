// Costs need numbers: every dim bound. An unbound symbol is an error saying which.
import type { Dim } from '../graph/ir.js';
import { OfframpError } from '../errors.js';

export function concrete(shape: Dim[] | undefined, value: string, node: string): number[] {
  if (!shape) throw new OfframpError('cost', `shape of '${value}' is unknown`, undefined, node);
  return shape.map((d) => {
    if (typeof d === 'number') {
      if (!Number.isSafeInteger(d) || d < 0) throw new OfframpError('cost', `dim ${d} of '${value}' is negative or absurd`, undefined, node);
      return d;
    }
    const sym = d.replace(/#\d+$/, '');
    throw new OfframpError('cost', `dim '${sym}' of '${value}' is unbound; give it with --dim ${sym.split('*')[0]}=VALUE`, undefined, node);
  });
}
