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
import { rules as constant } from './constant.js';
import { rules as shapeOps } from './shape.js';
import { rules as cast } from './cast.js';
import { rules as reshape } from './reshape.js';
import { rules as transpose } from './transpose.js';
import { rules as expand } from './expand.js';
import { rules as concat } from './concat.js';
import { rules as slice } from './slice.js';
import { rules as gather } from './gather.js';
import { rules as pad } from './pad.js';
import { rules as resize } from './resize.js';
import { rules as reduce } from './reduce.js';
import { rules as topk } from './topk.js';
import { rules as dynamic } from './dynamic.js';
import { rules as keepShape } from './keep-shape.js';
import { rules as control } from './control.js';

register([...elementwise, ...conv, ...gemm, ...einsum, ...pool, ...norm, ...softmax, ...rnn, ...quant,
  ...constant, ...shapeOps, ...cast, ...reshape, ...transpose, ...expand, ...concat, ...slice, ...gather,
  ...pad, ...resize, ...reduce, ...topk, ...dynamic, ...keepShape, ...control]);
