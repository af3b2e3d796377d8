// Every operator rule file, registered once. Add a new rule file here.
import { register } from './registry.js';
import { rules as elementwise } from './elementwise.js';
import { rules as conv } from './conv.js';
import { rules as gemm } from './gemm.js';
import { rules as einsum } from './einsum.js';
import { rules as pool } from './pool.js';
import { rules as norm } from './norm.js';
import { rules as softmax } from './softmax.js';
import { rules as rnn } from './rnn.js';
import { rules as quant } from './quant.js';

register([...elementwise, ...conv, ...gemm, ...einsum, ...pool, ...norm, ...softmax, ...rnn, ...quant]);
