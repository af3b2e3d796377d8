// Published classifiers built in code, laid out as exporters emit them: Conv, then
// BatchNormalization (unless `bn: false`, which folds it into a Conv bias), then Relu;
// GlobalAveragePool → Flatten → Gemm at the end, logits out (no Softmax).
// Initializer names follow the common PyTorch naming (conv1.weight, layer1.0.bn1.running_var).
import { modelBuilder, type ModelBuilder } from '../../lib/graph/build.js';
import { FLOAT } from '../../lib/onnx/dtype.js';
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

interface Ctx { b: ModelBuilder; o: NetOptions; zeros: boolean }

function start(name: string, o: NetOptions): Ctx & { x: string } {
  const zeros = o.weights === 'zeros';
  const b = modelBuilder({ opset: o.opset ?? 17, name, seed: o.seed ?? 1, fill: zeros ? 'zeros' : 'random' });
  return { b, o, zeros, x: b.input('input', FLOAT, [o.batch ?? 1, 3, 224, 224]) };
}

/** Conv (+BN) (+Relu). `p` is the parameter prefix, e.g. 'layer1.0.conv1' with its BN at 'layer1.0.bn1'. */
function conv(c: Ctx, x: string, p: string, bnName: string, cin: number, cout: number, k: number, stride: number, opts: { group?: number; relu?: boolean } = {}): string {
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
  return opts.relu === false ? y : c.b.node('Relu', [y], {}, { name: `${bnName}.relu` });
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
