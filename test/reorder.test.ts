import { describe, it, expect } from 'vitest';
import * as ort from 'onnxruntime-node';
import { memoryOrder, memoryOrderOf, reorderModel, reorderGraph } from '../lib/cost/reorder.js';
import { liveRanges, peakOver } from '../lib/cost/memory.js';
import { costModel } from '../lib/cost/report.js';
import { inferShapes } from '../lib/shapes/infer.js';
import { readsOf } from '../lib/graph/links.js';
import { modelBuilder, mulberry32 } from '../lib/graph/build.js';
import { modelToProto, type Graph, type Model } from '../lib/graph/ir.js';
import { encodeModel } from '../lib/onnx/codec.js';
import { openSession } from '../lib/runtime/ort.js';
import { checkSameOutputs } from '../lib/cost/reorder-check.js';
import { FLOAT } from '../lib/onnx/dtype.js';
import { model, vi, node, floatTensor } from './helpers/proto.js';
import { mobilenetV1, resnet18 } from './helpers/nets.js';

/** Peak of a whole order over steps [from, to], the way the cost report counts it. */
function peakOf(g: Graph, order: number[], sizes: Map<string, bigint>, inputs: string[], outputs: string[], from = 0, to = order.length - 1): bigint {
  const io = g.nodes.map((n) => ({ inputs: n.inputs, outputs: n.outputs, reads: readsOf(n) }));
  return peakOver(liveRanges(order, io, sizes, inputs, outputs), from, to).bytes;
}

/** Cost-report view of a model after reordering: the node order is the file order. */
function recost(m: Model, cuts: string[] = []) {
  const shapes = inferShapes(m);
  return costModel(m, { cuts, shapes: { ...shapes, order: m.graph.nodes.map((_, i) => i) } });
}

/*
 * Worked example: x[1,100] feeds two branches, each a wide MatMul (100→1000) then a narrow one (1000→10),
 * summed at the end. Bytes: x 400, a1 = b1 = 4000, a2 = b2 = 40, sum 40.
 *   file order a1, b1, a2, b2, add:  at b1, x + a1 + b1 = 8400 are live (x dies there, a1 waits for a2).
 *   branch by branch a1, a2, b1, b2: at a2 x + a1 + a2 = 4440; at b1 x + a2 + b1 = 4440; at b2 a2 + b1 + b2 = 4080.
 * Finishing branch a before starting b is the best order: its peak is 4440.
 */
function twoBranches(): Model {
  return model([
    node('MatMul', ['x', 'Wa1'], ['a1'], [], 'a1'), node('MatMul', ['x', 'Wb1'], ['b1'], [], 'b1'),
    node('MatMul', ['a1', 'Wa2'], ['a2'], [], 'a2'), node('MatMul', ['b1', 'Wb2'], ['b2'], [], 'b2'),
    node('Add', ['a2', 'b2'], ['y'], [], 'add'),
  ], [vi('x', [1, 100])], [vi('y', [1, 10])],
  [floatTensor('Wa1', [100, 1000]), floatTensor('Wb1', [100, 1000]), floatTensor('Wa2', [1000, 10]), floatTensor('Wb2', [1000, 10])]);
}

describe('memory-aware order on hand-made graphs', () => {
  it('finishes one branch before starting the other', () => {
    const m = twoBranches();
    const r = costModel(m);
    expect(r.model.peakActivationBytes).toBe(8400n);
    for (const exactNodes of [0, 20]) {
      const o = memoryOrderOf(m, r, { exactNodes });
      expect(o.order).toEqual([0, 2, 1, 3, 4]);
      expect([o.before, o.after]).toEqual([8400n, 4440n]);
    }
    const { model: m2 } = reorderModel(m, r);
    expect(m2.graph.nodes.map((n) => n.name)).toEqual(['a1', 'a2', 'b1', 'b2', 'add']);
    expect(recost(m2).model.peakActivationBytes).toBe(4440n);
    expect(m.graph.nodes.map((n) => n.name)).toEqual(['a1', 'b1', 'a2', 'b2', 'add']); // input left alone
  });
  it('never moves a node across a cut, and the node making the cut stays last', () => {
    const m = twoBranches();
    // Cut at b1: stage 0 is {a1, b1}, and b1 must stay its last step, so stage 0 cannot improve.
    const r = costModel(m, { cuts: ['b1'] });
    const o = memoryOrderOf(m, r);
    expect(o.order.slice(0, 2)).toEqual([0, 1]);
    expect(o.stages.map((s) => s.method)).toEqual(['kept', 'kept']);
    const r2 = recost(reorderModel(m, r).model, ['b1']);
    expect(r2.stages.map((s) => [s.first, s.last, s.cut, s.macs])).toEqual(r.stages.map((s) => [s.first, s.last, s.cut, s.macs]));
  });
  it('keeps the order when nothing is gained (ties keep the file order)', () => {
    const m = model([node('Relu', ['x'], ['a']), node('Relu', ['x'], ['b']), node('Add', ['a', 'b'], ['y'])], [vi('x', [4])], [vi('y', [4])]);
    const o = memoryOrderOf(m, costModel(m));
    expect(o.order).toEqual([0, 1, 2]);
    expect(o.stages[0]).toMatchObject({ method: 'kept', moved: 0 });
  });
  it('reorderGraph refuses an order that is not a permutation', () => {
    expect(() => reorderGraph(twoBranches().graph, [0, 1, 1, 2, 3])).toThrow(/reorder/);
  });
});

/** All topological orders of `nodes` (positions in order), the last one pinned when asked. */
function* orders(g: Graph, nodes: number[], pinLast: boolean): Generator<number[]> {
  const made = new Map<string, number>();
  nodes.forEach((n) => g.nodes[n].outputs.forEach((o) => made.set(o, n)));
  const deps = new Map(nodes.map((n) => [n, readsOf(g.nodes[n]).map((r) => made.get(r)).filter((p): p is number => p !== undefined)]));
  const rec = function* (done: number[], left: number[]): Generator<number[]> {
    if (!left.length) { yield done; return; }
    for (const n of left) {
      if (pinLast && left.length > 1 && n === nodes[nodes.length - 1]) continue;
      if (deps.get(n)!.every((d) => done.includes(d))) yield* rec([...done, n], left.filter((x) => x !== n));
    }
  };
  yield* rec([], nodes);
}

describe('memory-aware order against brute force on random graphs', () => {
  it('the exhaustive search finds the best order of every stage; greedy and exact never make the peak worse', () => {
    const rnd = mulberry32(7);
    const pick = <T>(xs: T[]) => xs[Math.floor(rnd() * xs.length)];
    let improved = 0, beatsGreedy = 0;
    for (let trial = 0; trial < 60; trial++) {
      const n = 4 + Math.floor(rnd() * 5);
      const values = ['x'];
      const sizes = new Map<string, bigint>([['x', BigInt(1 + Math.floor(rnd() * 9)) * 100n]]);
      const protos = [];
      for (let i = 0; i < n; i++) {
        const reads = [...new Set([pick(values), ...(rnd() < 0.5 ? [pick(values)] : [])])];
        const outs = rnd() < 0.2 ? [`v${i}`, `w${i}`] : [`v${i}`];
        for (const o of outs) { sizes.set(o, BigInt(1 + Math.floor(rnd() * 9)) * 100n); values.push(o); }
        protos.push(node('Op', reads, outs));
      }
      const outputs = [`v${n - 1}`, ...(rnd() < 0.3 ? [`v${Math.floor(n / 2)}`] : [])];
      const g = model(protos, [vi('x', [1])], outputs.map((o) => vi(o, [1]))).graph;
      const order = g.nodes.map((_, i) => i);
      const bounds = rnd() < 0.5 ? [Math.floor(rnd() * (n - 1))] : [];
      const ends = [...bounds, n - 1];
      const io = { inputs: ['x'], outputs };
      const o = memoryOrder(g, order, sizes, bounds, io);
      const greedyOnly = memoryOrder(g, order, sizes, bounds, io, { exactNodes: 0 });
      let first = 0;
      ends.forEach((last, k) => {
        const stage = order.slice(first, last + 1);
        let best: bigint | undefined;
        for (const p of orders(g, stage, k < ends.length - 1)) {
          const whole = [...order.slice(0, first), ...p, ...order.slice(last + 1)];
          const peak = peakOf(g, whole, sizes, io.inputs, io.outputs, first, last);
          if (best === undefined || peak < best) best = peak;
        }
        expect(o.stages[k].before).toBe(peakOf(g, order, sizes, io.inputs, io.outputs, first, last));
        expect(o.stages[k].after).toBe(best);
        expect(greedyOnly.stages[k].after <= greedyOnly.stages[k].before).toBe(true);
        if (best! < o.stages[k].before) improved++;
        if (best! < greedyOnly.stages[k].after) beatsGreedy++;
        // Every chosen order is a permutation of the stage and its peak is what it claims.
        expect([...o.order.slice(first, last + 1)].sort((a, b) => a - b)).toEqual(stage);
        first = last + 1;
      });
      expect(peakOf(g, o.order, sizes, io.inputs, io.outputs)).toBe(o.after);
    }
    // The cases are not all trivial: the file order is often beaten, and greedy alone sometimes falls short.
    expect(improved).toBeGreaterThan(5);
    expect(beatsGreedy).toBeGreaterThan(0);
  });
});

describe('published nets', () => {
  it.each([
    ['resnet18', () => resnet18({ weights: 'zeros' }), ['layer2.0.relu_out', 'layer3.0.relu_out']],
    ['mobilenet v1 0.25', () => mobilenetV1({ weights: 'zeros', width: 0.25 }), ['pw6.bn.relu_out']],
  ])('%s: the peak never gets worse, and the reordered report agrees', (_name, make, cuts) => {
    const m = make();
    for (const c of [[], cuts]) {
      const r = costModel(m, { cuts: c });
      const { model: m2, order } = reorderModel(m, r);
      expect(order.after <= order.before).toBe(true);
      expect(order.before).toBe(r.model.peakActivationBytes);
      const r2 = recost(m2, c);
      expect(r2.model.peakActivationBytes).toBe(order.after);
      expect(r2.stages.map((s) => s.peakActivationBytes)).toEqual(order.stages.map((s) => s.after));
      expect(r2.model.macs).toBe(r.model.macs);
    }
  });
});

/**
 * Four branches from one input, written layer by layer as some exporters do: all the wide 1×1 convs, then all
 * the Relus, then all the narrow 3×3 convs, so all four wide tensors are live at once. Concat, pool, classify.
 */
function interleaved(): Model {
  const b = modelBuilder({ opset: 17, seed: 3 });
  const x = b.input('x', FLOAT, [1, 8, 16, 16]);
  const wide = [0, 1, 2, 3].map((i) => b.node('Conv', [x, b.init(`w${i}a`, FLOAT, [32, 8, 1, 1]), b.init(`b${i}a`, FLOAT, [32])], { kernel_shape: [1, 1] }, { name: `br${i}.wide` }));
  const act = wide.map((t, i) => b.node('Relu', [t], {}, { name: `br${i}.relu` }));
  const narrow = act.map((t, i) => b.node('Conv', [t, b.init(`w${i}b`, FLOAT, [4, 32, 3, 3]), b.init(`b${i}b`, FLOAT, [4])], { kernel_shape: [3, 3], pads: [1, 1, 1, 1] }, { name: `br${i}.narrow` }));
  const cat = b.node('Concat', narrow, { axis: 1 }, { name: 'concat' });
  const flat = b.node('Flatten', [b.node('GlobalAveragePool', [cat], {}, { name: 'gap' })], { axis: 1 }, { name: 'flatten' });
  const y = b.node('Gemm', [flat, b.init('fc.w', FLOAT, [10, 16]), b.init('fc.b', FLOAT, [10])], { transB: 1 }, { name: 'fc', outputs: ['logits'] })[0];
  b.output(y, FLOAT, [1, 10]);
  b.output(cat, FLOAT, [1, 16, 16, 16]);
  return b.build();
}

async function runAll(m: Model, seed: number): Promise<Map<string, Uint8Array>> {
  const s = await openSession(encodeModel(modelToProto(m)));
  const rnd = mulberry32(seed);
  const x = Float32Array.from({ length: 8 * 16 * 16 }, () => rnd() * 2 - 1);
  // Feeds only, every output: onnxruntime-node 1.23 answers a fetch-name array with the wrong outputs.
  const out = await s.run({ x: new ort.Tensor('float32', x, [1, 8, 16, 16]) });
  await s.release();
  return new Map(Object.entries(out).map(([k, t]) => [k, new Uint8Array((t.data as Float32Array).slice().buffer)]));
}

describe('reordered models compute the same outputs (onnxruntime)', () => {
  it.each([[[] as string[]], [['br1.narrow_out']]])('cuts %j: lower peak, bit-identical outputs on seeded inputs', async (cuts) => {
    const m = interleaved();
    const r = costModel(m, { cuts });
    const { model: m2, order } = reorderModel(m, r);
    expect(order.after < order.before).toBe(true);
    expect(m2.graph.nodes.map((n) => n.name)).not.toEqual(m.graph.nodes.map((n) => n.name));
    for (const seed of [1, 2, 3]) {
      const [a, b] = [await runAll(m, seed), await runAll(m2, seed)];
      expect([...b.keys()].sort()).toEqual([...a.keys()].sort());
      for (const [k, v] of a) expect(Buffer.compare(Buffer.from(v), Buffer.from(b.get(k)!))).toBe(0);
    }
  });
});

describe('checkSameOutputs', () => {
  const spec = [{ name: 'x', dtype: FLOAT, shape: [1, 8, 16, 16] }];
  it('passes a reordered model and names the output of a changed one', async () => {
    const m = interleaved();
    const { model: m2 } = reorderModel(m, costModel(m));
    await expect(checkSameOutputs(m, m2, spec)).resolves.toBeUndefined();
    // Swap the inputs of a Conv's weights for another branch's: same shapes, different numbers.
    const nodes = m2.graph.nodes.map((n) => (n.name === 'br0.wide' ? { ...n, inputs: [n.inputs[0], 'w1a', n.inputs[2]] } : n));
    await expect(checkSameOutputs(m, { ...m2, graph: { ...m2.graph, nodes } }, spec, { file: 'm.onnx' })).rejects.toThrow(/reordered model differs from the original at output '(logits|concat_out)'/);
  });
});
