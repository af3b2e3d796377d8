// Published classifiers built in code, laid out as exporters emit them: Conv, then
// BatchNormalization (unless `bn: false`, which folds it into a Conv bias), then Relu;
// GlobalAveragePool → Flatten → Gemm at the end, logits out (no Softmax).
// Initializer names follow the common PyTorch naming (conv1.weight, layer1.0.bn1.running_var).
import { modelBuilder, type ModelBuilder } from '../../lib/graph/build.js';
import { FLOAT, INT64 } from '../../lib/onnx/dtype.js';
import type { Dim, Model } from '../../lib/graph/ir.js';

export interface NetOptions {
  /** 'random': seeded deterministic weights (default); 'zeros': all-zero weights (BN variance 1), cheap to make. */
  weights?: 'random' | 'zeros';
  seed?: number;
  /** Emit BatchNormalization after each conv (default), or fold it into a Conv bias. */
  bn?: boolean;
  batch?: Dim;
  classes?: number;
  opset?: number;
}

interface Ctx { b: ModelBuilder; o: NetOptions; zeros: boolean; clip?: [string, string] }

function start(name: string, o: NetOptions): Ctx & { x: string } {
  const zeros = o.weights === 'zeros';
  const b = modelBuilder({ opset: o.opset ?? 17, name, seed: o.seed ?? 1, fill: zeros ? 'zeros' : 'random' });
  return { b, o, zeros, x: b.input('input', FLOAT, [o.batch ?? 1, 3, 224, 224]) };
}

/** Activations as exporters write them: Relu; ReLU6 as Clip(0, 6); SiLU (swish) as Sigmoid then Mul. */
type Act = 'relu' | 'relu6' | 'silu' | 'none';

function activate(c: Ctx, x: string, act: Act, name: string): string {
  const { b } = c;
  if (act === 'none') return x;
  if (act === 'relu') return b.node('Relu', [x], {}, { name: `${name}.relu` });
  if (act === 'relu6') {
    c.clip ??= [b.init('relu6.min', FLOAT, [], [0]), b.init('relu6.max', FLOAT, [], [6])];
    return b.node('Clip', [x, ...c.clip], {}, { name: `${name}.relu6` });
  }
  return b.node('Mul', [x, b.node('Sigmoid', [x], {}, { name: `${name}.sigmoid` })], {}, { name: `${name}.silu` });
}

/** Conv (+BN) (+activation, Relu by default). `p` is the parameter prefix, e.g. 'layer1.0.conv1' with its BN at 'layer1.0.bn1'. */
function conv(c: Ctx, x: string, p: string, bnName: string, cin: number, cout: number, k: number, stride: number, opts: { group?: number; relu?: boolean; act?: Act } = {}): string {
  const { b } = c, group = opts.group ?? 1, pad = (k - 1) >> 1, bn = c.o.bn ?? true;
  const w = b.init(`${p}.weight`, FLOAT, [cout, cin / group, k, k]);
  const ins = bn ? [x, w] : [x, w, b.init(`${p}.bias`, FLOAT, [cout], c.zeros ? 'zeros' : { uniform: [-0.1, 0.1] })];
  let y = b.node('Conv', ins, { kernel_shape: [k, k], strides: [stride, stride], pads: [pad, pad, pad, pad], group, dilations: [1, 1] }, { name: p });
  if (bn) {
    const ch = (s: string, d: { uniform: [number, number] }) => b.init(`${bnName}.${s}`, FLOAT, [cout], c.zeros ? 'zeros' : d);
    const scale = ch('weight', { uniform: [0.8, 1.2] }), bias = ch('bias', { uniform: [-0.1, 0.1] });
    const mean = ch('running_mean', { uniform: [-0.1, 0.1] });
    const v = b.init(`${bnName}.running_var`, FLOAT, [cout], c.zeros ? { fill: 1 } : { uniform: [0.5, 1.5] });
    y = b.node('BatchNormalization', [y, scale, bias, mean, v], { epsilon: b.float(1e-5), momentum: b.float(0.9) }, { name: bnName });
  }
  return activate(c, y, opts.act ?? (opts.relu === false ? 'none' : 'relu'), bnName);
}

function head(c: Ctx, x: string, cin: number): Model {
  const { b } = c, classes = c.o.classes ?? 1000;
  const pooled = b.node('GlobalAveragePool', [x], {}, { name: 'avgpool' });
  const flat = b.node('Flatten', [pooled], { axis: 1 }, { name: 'flatten' });
  const w = b.init('fc.weight', FLOAT, [classes, cin]), bias = b.init('fc.bias', FLOAT, [classes], c.zeros ? 'zeros' : { uniform: [-0.1, 0.1] });
  const y = b.node('Gemm', [flat, w, bias], { transB: 1 }, { name: 'fc', outputs: ['logits'] })[0];
  b.output(y, FLOAT, [c.o.batch ?? 1, classes]);
  return b.build();
}

/** MobileNet v1 (Howard et al. 2017, Table 1), width multiplier `width` (default 1.0), 224×224. */
export function mobilenetV1(o: NetOptions & { width?: number } = {}): Model {
  const c = start('mobilenet_v1', o);
  const ch = (n: number) => Math.round(n * (o.width ?? 1));
  let x = conv(c, c.x, 'conv0', 'bn0', 3, ch(32), 3, 2);
  let cin = ch(32);
  // Table 1's second-to-last dw row says s2, but its 7×7 input and output mean stride 1 (from memory; every port uses 1).
  const rows: [number, number][] = [[64, 1], [128, 2], [128, 1], [256, 2], [256, 1], [512, 2], [512, 1], [512, 1], [512, 1], [512, 1], [512, 1], [1024, 2], [1024, 1]];
  rows.forEach(([cout, s], i) => {
    x = conv(c, x, `dw${i + 1}`, `dw${i + 1}.bn`, cin, cin, 3, s, { group: cin });
    x = conv(c, x, `pw${i + 1}`, `pw${i + 1}.bn`, cin, ch(cout), 1, 1);
    cin = ch(cout);
  });
  return head(c, x, cin);
}

interface ResNetSpec { blocks: number[]; bottleneck: boolean }

/**
 * ResNet (He et al. 2016, Table 1), projection shortcuts (option B) where shape changes.
 * Bottleneck blocks downsample in the first 1×1 as the paper's conv3_1/4_1/5_1 do
 * (`strideOn: '3x3'` gives the later variant, about 4.1G instead of 3.8G mult-adds).
 */
function resnet(name: string, spec: ResNetSpec, o: NetOptions & { strideOn?: '1x1' | '3x3' }): Model {
  const c = start(name, o), { b } = c;
  let x = conv(c, c.x, 'conv1', 'bn1', 3, 64, 7, 2);
  x = b.node('MaxPool', [x], { kernel_shape: [3, 3], strides: [2, 2], pads: [1, 1, 1, 1] }, { name: 'maxpool' });
  let cin = 64;
  const exp = spec.bottleneck ? 4 : 1;
  spec.blocks.forEach((n, s) => {
    const w = 64 << s;
    for (let i = 0; i < n; i++) {
      const p = `layer${s + 1}.${i}`, stride = i === 0 && s > 0 ? 2 : 1, cout = w * exp;
      let y: string;
      if (spec.bottleneck) {
        const s1 = o.strideOn === '3x3' ? 1 : stride;
        y = conv(c, x, `${p}.conv1`, `${p}.bn1`, cin, w, 1, s1);
        y = conv(c, y, `${p}.conv2`, `${p}.bn2`, w, w, 3, stride / s1);
        y = conv(c, y, `${p}.conv3`, `${p}.bn3`, w, cout, 1, 1, { relu: false });
      } else {
        y = conv(c, x, `${p}.conv1`, `${p}.bn1`, cin, w, 3, stride);
        y = conv(c, y, `${p}.conv2`, `${p}.bn2`, w, w, 3, 1, { relu: false });
      }
      const short = stride !== 1 || cin !== cout
        ? conv(c, x, `${p}.downsample.0`, `${p}.downsample.1`, cin, cout, 1, stride, { relu: false })
        : x;
      x = b.node('Relu', [b.node('Add', [y, short], {}, { name: `${p}.add` })], {}, { name: `${p}.relu` });
      cin = cout;
    }
  });
  return head(c, x, cin);
}

export const resnet18 = (o: NetOptions = {}): Model => resnet('resnet18', { blocks: [2, 2, 2, 2], bottleneck: false }, o);
export const resnet50 = (o: NetOptions & { strideOn?: '1x1' | '3x3' } = {}): Model => resnet('resnet50', { blocks: [3, 4, 6, 3], bottleneck: true }, o);

/** A 1×1 conv with a bias and no BN (the squeeze-and-excitation layers). */
function conv1x1Bias(c: Ctx, x: string, p: string, cin: number, cout: number): string {
  const { b } = c;
  const w = b.init(`${p}.weight`, FLOAT, [cout, cin, 1, 1]), bias = b.init(`${p}.bias`, FLOAT, [cout], c.zeros ? 'zeros' : { uniform: [-0.1, 0.1] });
  return b.node('Conv', [x, w, bias], { kernel_shape: [1, 1], strides: [1, 1], pads: [0, 0, 0, 0], group: 1, dilations: [1, 1] }, { name: p });
}

/**
 * MobileNet v2 (Sandler et al. 2018, Table 2): inverted residual bottlenecks (expansion t, channels c,
 * repeats n, first stride s), ReLU6 as Clip, linear projections, a residual add where shape allows.
 */
export function mobilenetV2(o: NetOptions = {}): Model {
  const c = start('mobilenet_v2', o), { b } = c;
  let x = conv(c, c.x, 'features.0.0', 'features.0.1', 3, 32, 3, 2, { act: 'relu6' });
  let cin = 32, i = 1;
  const rows: [number, number, number, number][] = [[1, 16, 1, 1], [6, 24, 2, 2], [6, 32, 3, 2], [6, 64, 4, 2], [6, 96, 3, 1], [6, 160, 3, 2], [6, 320, 1, 1]];
  for (const [t, cout, n, s] of rows) {
    for (let r = 0; r < n; r++, i++) {
      const p = `features.${i}.conv`, stride = r === 0 ? s : 1, hidden = cin * t;
      let y = x, k = 0;
      if (t !== 1) y = conv(c, y, `${p}.${k}.0`, `${p}.${k++}.1`, cin, hidden, 1, 1, { act: 'relu6' });
      y = conv(c, y, `${p}.${k}.0`, `${p}.${k++}.1`, hidden, hidden, 3, stride, { group: hidden, act: 'relu6' });
      y = conv(c, y, `${p}.${k}`, `${p}.${k + 1}`, hidden, cout, 1, 1, { act: 'none' });
      x = stride === 1 && cin === cout ? b.node('Add', [x, y], {}, { name: `features.${i}.add` }) : y;
      cin = cout;
    }
  }
  x = conv(c, x, `features.${i}.0`, `features.${i}.1`, cin, 1280, 1, 1, { act: 'relu6' });
  return head(c, x, 1280);
}

/**
 * EfficientNet-B0 (Tan & Le 2019, Table 1): MBConv blocks with squeeze-and-excitation (a quarter of the
 * block's input channels) and SiLU; stage rows (expansion, kernel, stride, channels, layers).
 */
export function efficientnetB0(o: NetOptions = {}): Model {
  const c = start('efficientnet_b0', o), { b } = c;
  let x = conv(c, c.x, 'features.0.0', 'features.0.1', 3, 32, 3, 2, { act: 'silu' });
  let cin = 32;
  const rows: [number, number, number, number, number][] = [[1, 3, 1, 16, 1], [6, 3, 2, 24, 2], [6, 5, 2, 40, 2], [6, 3, 2, 80, 3], [6, 5, 1, 112, 3], [6, 5, 2, 192, 4], [6, 3, 1, 320, 1]];
  rows.forEach(([t, k, s, cout, n], st) => {
    for (let r = 0; r < n; r++) {
      const p = `features.${st + 1}.${r}.block`, stride = r === 0 ? s : 1, hidden = cin * t;
      let y = x, j = 0;
      if (t !== 1) y = conv(c, y, `${p}.${j}.0`, `${p}.${j++}.1`, cin, hidden, 1, 1, { act: 'silu' });
      y = conv(c, y, `${p}.${j}.0`, `${p}.${j++}.1`, hidden, hidden, k, stride, { group: hidden, act: 'silu' });
      const sq = Math.max(1, Math.floor(cin / 4));
      const pooled = b.node('GlobalAveragePool', [y], {}, { name: `${p}.${j}.avgpool` });
      const f1 = activate(c, conv1x1Bias(c, pooled, `${p}.${j}.fc1`, hidden, sq), 'silu', `${p}.${j}.fc1`);
      const scale = b.node('Sigmoid', [conv1x1Bias(c, f1, `${p}.${j}.fc2`, sq, hidden)], {}, { name: `${p}.${j}.scale` });
      y = b.node('Mul', [y, scale], {}, { name: `${p}.${j++}.excite` });
      y = conv(c, y, `${p}.${j}.0`, `${p}.${j}.1`, hidden, cout, 1, 1, { act: 'none' });
      x = stride === 1 && cin === cout ? b.node('Add', [x, y], {}, { name: `features.${st + 1}.${r}.add` }) : y;
      cin = cout;
    }
  });
  x = conv(c, x, 'features.8.0', 'features.8.1', cin, 1280, 1, 1, { act: 'silu' });
  return head(c, x, 1280);
}

/**
 * ShuffleNet v2 1.0× (Ma et al. 2018, Table 5): stages of 4, 8, 4 units at 116, 232, 464 channels.
 * A stride-2 unit runs two branches on the whole input; the others split the channels in halves
 * (Split), transform one half, Concat, then shuffle two groups (Reshape, Transpose, Reshape; batch 1).
 */
export function shufflenetV2(o: NetOptions = {}): Model {
  const c = start('shufflenet_v2_x1_0', o), { b } = c;
  let x = conv(c, c.x, 'conv1.0', 'conv1.1', 3, 24, 3, 2);
  x = b.node('MaxPool', [x], { kernel_shape: [3, 3], strides: [2, 2], pads: [1, 1, 1, 1] }, { name: 'maxpool' });
  let cin = 24, hw = 56;
  [[116, 4], [232, 8], [464, 4]].forEach(([cout, n], st) => {
    for (let r = 0; r < n; r++) {
      const p = `stage${st + 2}.${r}`, half = cout / 2;
      let left: string, right: string;
      if (r === 0) {
        hw /= 2;
        left = conv(c, x, `${p}.branch1.0`, `${p}.branch1.1`, cin, cin, 3, 2, { group: cin, act: 'none' });
        left = conv(c, left, `${p}.branch1.2`, `${p}.branch1.3`, cin, half, 1, 1);
        right = x;
      } else {
        const sizes = b.init(`${p}.split`, INT64, [2], [half, half]);
        [left, right] = b.node('Split', [x, sizes], { axis: 1 }, { name: `${p}.chunk`, outputs: 2 });
      }
      const rin = r === 0 ? cin : half;
      right = conv(c, right, `${p}.branch2.0`, `${p}.branch2.1`, rin, half, 1, 1);
      right = conv(c, right, `${p}.branch2.3`, `${p}.branch2.4`, half, half, 3, r === 0 ? 2 : 1, { group: half, act: 'none' });
      right = conv(c, right, `${p}.branch2.5`, `${p}.branch2.6`, half, half, 1, 1);
      const cat = b.node('Concat', [left, right], { axis: 1 }, { name: `${p}.concat` });
      const g = b.node('Reshape', [cat, b.init(`${p}.groups`, INT64, [5], [1, 2, half, hw, hw])], {}, { name: `${p}.view` });
      const tr = b.node('Transpose', [g], { perm: [0, 2, 1, 3, 4] }, { name: `${p}.transpose` });
      x = b.node('Reshape', [tr, b.init(`${p}.shape`, INT64, [4], [1, cout, hw, hw])], {}, { name: `${p}.shuffle` });
      cin = cout;
    }
  });
  x = conv(c, x, 'conv5.0', 'conv5.1', cin, 1024, 1, 1);
  return head(c, x, 1024);
}

/** A tiny MLP classifier (16 → 24 → 24 → 24 → 4, Relu): a build of it takes about a second. */
export function tinyMlp(): Model {
  const b = modelBuilder({ opset: 17, seed: 5 });
  let x = b.input('x', 1, ['N', 16]);
  for (let i = 0; i < 3; i++) x = b.node('Relu', [b.node('MatMul', [x, b.init(`w${i}`, 1, [i ? 24 : 16, 24])])]);
  b.output(b.node('MatMul', [x, b.init('wo', 1, [24, 4])]), 1, ['N', 4]);
  return b.build();
}

/**
 * A small CNN with the operators of the int8 firmware beyond the plain conv stack (3×12×12 in, 4 classes):
 * SiLU (Sigmoid and a same-shape Mul), a residual Add with a fused Relu, a squeeze-and-excitation gate
 * (HardSigmoid, a per-channel Mul with the gate first), a Split into HardSwish and Tanh branches joined by a Concat, a Transpose,
 * a Slice, LeakyRelu, and a HardSwish written out (Add, Clip and Div by scalar constants, a Mul). Cut values are named `pool` and `shuffled`; `softmax: true` puts a Softmax (no int8
 * kernel) after the first conv instead, its output named `attended`.
 */
export function opsNet(o: { softmax?: boolean } = {}): Model {
  const b = modelBuilder({ opset: 17, name: 'ops_net', seed: 7 });
  // He-uniform weights (±sqrt(6 / fan-in), He et al. 2015): the signal keeps its size through the layers, so the logits vary with the input
  const he = (fanIn: number): { uniform: [number, number] } => ({ uniform: [-Math.sqrt(6 / fanIn), Math.sqrt(6 / fanIn)] });
  const conv = (x: string, name: string, cin: number, cout: number, k: number, stride = 1) => b.node('Conv', [x, b.init(`${name}.weight`, FLOAT, [cout, cin, k, k], he(cin * k * k)), b.init(`${name}.bias`, FLOAT, [cout], { uniform: [-0.1, 0.1] })],
    { kernel_shape: [k, k], strides: [stride, stride], pads: new Array(4).fill((k - 1) >> 1) }, { name });
  const x = b.input('input', FLOAT, ['N', 3, 12, 12]);
  const c1 = conv(x, 'conv1', 3, 8, 3);
  if (o.softmax) {
    const s = b.node('Softmax', [c1], { axis: 1 }, { name: 'attend', outputs: ['attended'] })[0];
    const y = conv(s, 'conv2', 8, 4, 3);
    const pooled = b.node('Flatten', [b.node('GlobalAveragePool', [y], {}, { name: 'gap' })], { axis: 1 }, { name: 'flatten' });
    b.output(b.node('Gemm', [pooled, b.init('fc.weight', FLOAT, [4, 4]), b.init('fc.bias', FLOAT, [4])], { transB: 1 }, { name: 'fc', outputs: ['logits'] })[0], FLOAT, ['N', 4]);
    return b.build();
  }
  const a1 = b.node('Mul', [c1, b.node('Sigmoid', [c1], {}, { name: 'conv1.sigmoid' })], {}, { name: 'conv1.silu' });
  const r = conv(a1, 'block.conv', 8, 8, 3);
  const res = b.node('Relu', [b.node('Add', [r, a1], {}, { name: 'block.add' })], {}, { name: 'block.relu' });
  const pool = b.node('MaxPool', [res], { kernel_shape: [2, 2], strides: [2, 2] }, { name: 'pool', outputs: ['pool'] })[0];
  const g = b.node('GlobalAveragePool', [pool], {}, { name: 'se.pool' });
  const s1 = b.node('Relu', [conv(g, 'se.fc1', 8, 4, 1)], {}, { name: 'se.relu' });
  const gate = b.node('HardSigmoid', [conv(s1, 'se.fc2', 4, 8, 1)], { alpha: b.float(1 / 6), beta: b.float(0.5) }, { name: 'se.gate' });
  const se = b.node('Mul', [gate, pool], {}, { name: 'se.excite' });
  const [p1, p2] = b.node('Split', [se, b.init('split.sizes', INT64, [2], [3, 5])], { axis: 1 }, { name: 'split', outputs: 2 });
  const h = b.node('HardSwish', [conv(p1, 'branch1', 3, 6, 1)], {}, { name: 'branch1.hswish' });
  const t = b.node('Tanh', [conv(p2, 'branch2', 5, 4, 3)], {}, { name: 'branch2.tanh' });
  const cat = b.node('Concat', [h, t], { axis: 1 }, { name: 'concat' });
  const tr = b.node('Transpose', [cat], { perm: [0, 1, 3, 2] }, { name: 'transpose', outputs: ['shuffled'] })[0];
  // columns 1 … end (ends as exporters write "to the end": INT64_MAX)
  const cols = b.node('Slice', [tr, b.init('crop.starts', INT64, [1], [1]), b.init('crop.ends', INT64, [1], [9223372036854775807n]), b.init('crop.axes', INT64, [1], [3])], {}, { name: 'crop' });
  const l = b.node('LeakyRelu', [conv(cols, 'conv3', 10, 12, 3, 2)], { alpha: b.float(0.1) }, { name: 'conv3.leaky' });
  // HardSwish written out as older exporters do: x · Clip(x + 3, 0, 6) / 6
  const k = (name: string, v: number) => b.init(name, FLOAT, [], [v]);
  const relu6 = b.node('Clip', [b.node('Add', [l, k('three', 3)], {}, { name: 'hs.add' }), k('zero', 0), k('six', 6)], {}, { name: 'hs.clip' });
  const hs = b.node('Mul', [l, b.node('Div', [relu6, k('six.d', 6)], {}, { name: 'hs.div' })], {}, { name: 'hs.mul' });
  const pooled = b.node('Flatten', [b.node('GlobalAveragePool', [hs], {}, { name: 'gap' })], { axis: 1 }, { name: 'flatten' });
  b.output(b.node('Gemm', [pooled, b.init('fc.weight', FLOAT, [4, 12], he(12)), b.init('fc.bias', FLOAT, [4], { uniform: [-0.1, 0.1] })], { transB: 1 }, { name: 'fc', outputs: ['logits'] })[0], FLOAT, ['N', 4]);
  return b.build();
}
