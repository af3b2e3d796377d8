// Tiny hand-built models for unit tests, straight from proto objects.
import { modelFromProto, type Model } from '../../lib/graph/ir.js';
import type { NodeProto, TensorProto, ValueInfoProto, AttributeProto } from '../../lib/onnx/types.js';

export const vi = (name: string, dims: (number | string)[], elemType = 1): ValueInfoProto => ({
  name, type: { tensorType: { elemType, shape: { dim: dims.map((d) => (typeof d === 'number' ? { dimValue: BigInt(d) } : { dimParam: d })) } } },
});
export const node = (op: string, input: string[], output: string[], attribute: AttributeProto[] = [], name?: string): NodeProto =>
  ({ opType: op, input, output, attribute, ...(name && { name }) });
export const ints = (name: string, v: number[]): AttributeProto => ({ name, type: 7, ints: BigInt64Array.from(v.map(BigInt)) });
export const int = (name: string, v: number): AttributeProto => ({ name, type: 2, i: BigInt(v) });
export const floatTensor = (name: string, dims: number[], data?: number[]): TensorProto => {
  const n = dims.reduce((a, b) => a * b, 1);
  return { name, dims: BigInt64Array.from(dims.map(BigInt)), dataType: 1, rawData: new Uint8Array(Float32Array.from(data ?? new Array(n).fill(0.5)).buffer) };
};
export const int64Tensor = (name: string, data: number[], dims = [data.length]): TensorProto =>
  ({ name, dims: BigInt64Array.from(dims.map(BigInt)), dataType: 7, int64Data: BigInt64Array.from(data.map(BigInt)) });

export function model(nodes: NodeProto[], inputs: ValueInfoProto[], outputs: ValueInfoProto[], initializer: TensorProto[] = [], opset = 17): Model {
  return modelFromProto({
    irVersion: 8n, opsetImport: [{ domain: '', version: BigInt(opset) }], producerName: 'offramp-test',
    graph: { name: 'g', node: nodes, input: inputs, output: outputs, initializer },
  });
}
