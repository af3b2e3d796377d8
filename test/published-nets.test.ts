// The cost model on published classifiers, against the papers' figures and against an
// independent count from their layer tables (mult-adds of a conv: k·k·cin/group·cout·H·W).
// The builders (test/helpers/nets.ts) also serve the arena checks (arena.test.ts); exact
// parameter counts here are what says their structure is the published one.
import { describe, test, expect } from 'vitest';
import { costModel } from '../lib/cost/report.js';
import { efficientnetB0, mobilenetV1, mobilenetV2, resnet18, resnet50, shufflenetV2 } from './helpers/nets.js';

const near = (x: bigint, fig: number, rel: number) => expect(Math.abs(Number(x) / fig - 1)).toBeLessThanOrEqual(rel);

/** Conv/FC mult-adds, weights and BN channels of a layer table, counted apart from the graph. */
function tally() {
  let macs = 0, weights = 0, channels = 0;
  const conv = (cin: number, cout: number, k: number, hw: number, group = 1) => {
    macs += (cin / group) * cout * k * k * hw * hw; weights += (cin / group) * cout * k * k; channels += cout;
  };
  const fc = (cin: number, cout: number) => { macs += cin * cout; weights += cin * cout + cout; };
  return { conv, fc, get: () => ({ macs, weights, channels }) };
}

function mobilenetTable() {
  const t = tally();
  t.conv(3, 32, 3, 112);
  let cin = 32, hw = 112;
  // Howard et al. 2017, Table 1 rows (the 7×7 dw row at stride 1).
  for (const [cout, s] of [[64, 1], [128, 2], [128, 1], [256, 2], [256, 1], [512, 2], [512, 1], [512, 1], [512, 1], [512, 1], [512, 1], [1024, 2], [1024, 1]]) {
    hw /= s;
    t.conv(cin, cin, 3, hw, cin); t.conv(cin, cout, 1, hw);
    cin = cout;
  }
  t.fc(1024, 1000);
  return t.get();
}

function resnetTable(blocks: number[], bottleneck: boolean) {
  const t = tally();
  t.conv(3, 64, 7, 112);
  let cin = 64, hw = 56;
  // He et al. 2016, Table 1: stages conv2_x..conv5_x, downsampling at the first block of conv3..5.
  blocks.forEach((n, s) => {
    const w = 64 << s, cout = bottleneck ? 4 * w : w;
    for (let i = 0; i < n; i++) {
      if (i === 0 && s > 0) hw /= 2;
      if (bottleneck) { t.conv(cin, w, 1, hw); t.conv(w, w, 3, hw); t.conv(w, cout, 1, hw); } else { t.conv(cin, w, 3, hw); t.conv(w, w, 3, hw); }
      if (cin !== cout) t.conv(cin, cout, 1, hw);
      cin = cout;
    }
  });
  t.fc(cin, 1000);
  return t.get();
}

describe('published figures', () => {
  test('MobileNet v1 1.0-224', () => {
    const ref = mobilenetTable();
    for (const bn of [true, false]) {
      const r = costModel(mobilenetV1({ weights: 'zeros', bn })).model;
      expect(r.macs).toBe(BigInt(ref.macs));
      // BN keeps 4 values per channel (scale, bias, mean, var); folded, a Conv bias keeps 1.
      expect(r.params).toBe(BigInt(ref.weights + (bn ? 4 : 1) * ref.channels));
      near(r.macs, 569e6, 0.005); // Howard et al. 2017, Table 8: 1.0 MobileNet-224, 569 million mult-adds
      near(r.params, 4.2e6, 0.015); // same table: 4.2 million parameters
    }
    // The whole-model total with BN including its running statistics, as the Keras reference port reports it (from memory).
    expect(costModel(mobilenetV1({ weights: 'zeros' })).model.params).toBe(4_253_864n);
  });

  test('ResNet-18', () => {
    const ref = resnetTable([2, 2, 2, 2], false);
    const r = costModel(resnet18({ weights: 'zeros' })).model;
    expect(r.macs).toBe(BigInt(ref.macs));
    expect(r.params).toBe(BigInt(ref.weights + 4 * ref.channels));
    near(r.macs, 1.8e9, 0.01); // He et al. 2016, Table 1: 18-layer, 1.8×10^9 FLOPs (mult-adds)
    // 11.7M: the common torchvision figure, BN scale and bias counted, running stats not (from memory; the paper gives none).
    expect(r.params - 2n * BigInt(ref.channels)).toBe(11_689_512n);
  });

  test('ResNet-50', () => {
    const ref = resnetTable([3, 4, 6, 3], true);
    const r = costModel(resnet50({ weights: 'zeros' })).model;
    expect(r.macs).toBe(BigInt(ref.macs));
    expect(r.params).toBe(BigInt(ref.weights + 4 * ref.channels));
    near(r.macs, 3.8e9, 0.02); // He et al. 2016, Table 1: 50-layer, 3.8×10^9 FLOPs (mult-adds); 3.86G unrounded
    expect(r.params - 2n * BigInt(ref.channels)).toBe(25_557_032n); // torchvision's 25.6M, counted as for ResNet-18 (from memory)
    // Striding in the 3×3 instead (the later variant) costs about 4.1G (from memory), params unchanged.
    const v15 = costModel(resnet50({ weights: 'zeros', strideOn: '3x3' })).model;
    near(v15.macs, 4.09e9, 0.005);
    expect(v15.params).toBe(r.params);
  });

  /** Parameters as torchvision counts them: BN scale and bias but not its running statistics, float weights only. */
  const torchvisionParams = (make: (o: { weights: 'zeros'; bn: boolean }) => Parameters<typeof costModel>[0]) => {
    const withBn = costModel(make({ weights: 'zeros', bn: true })).model, folded = costModel(make({ weights: 'zeros', bn: false })).model;
    // Each BN channel keeps 4 values, a folded conv bias 1: the difference is 3 per channel.
    const channels = (withBn.params - folded.params) / 3n;
    const shapes = (withBn.paramBytesByType.int64 ?? 0n) / 8n; // Reshape/Split shape tensors are not parameters
    return { macs: withBn.macs, params: withBn.params - 2n * channels - shapes };
  };

  test('MobileNet v2 1.0-224', () => {
    const r = torchvisionParams(mobilenetV2);
    near(r.macs, 300e6, 0.005); // Sandler et al. 2018, Table 4: MobileNetV2, 300M multiply-adds
    near(r.params, 3.4e6, 0.035); // same table: 3.4M parameters
    expect(r.params - 2n).toBe(3_504_872n); // torchvision's count (from memory); 2 = the Clip bounds of ReLU6, stored as initializers
  });

  test('EfficientNet-B0', () => {
    const r = torchvisionParams(efficientnetB0);
    near(r.macs, 0.39e9, 0.015); // Tan & Le 2019, Table 2: EfficientNet-B0, 0.39B FLOPS (multiply-adds), 5.3M parameters
    near(r.params, 5.3e6, 0.005);
    expect(r.params).toBe(5_288_548n); // torchvision's count (from memory)
  });

  test('ShuffleNet v2 1.0×', () => {
    const r = torchvisionParams(shufflenetV2);
    near(r.macs, 146e6, 0.01); // Ma et al. 2018, Table 5: ShuffleNet v2 1×, 146M FLOPs (multiply-adds), 2.3M parameters
    near(r.params, 2.3e6, 0.01);
    expect(r.params).toBe(2_278_604n); // torchvision's count (from memory)
  });
});
