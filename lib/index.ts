// The library's public surface: `import { loadModel, analyzeModel } from 'offramp'`.
export { loadModel, parseModel, saveModel, type LoadedModel, type LoadOptions, type SaveOptions, type SaveReport } from './graph/io.js';
export type { Model, Graph, Node, ValueInfo, TensorType, Dim } from './graph/ir.js';
export { modelFromProto, modelToProto, graphFromProto, graphToProto, typeFromProto, typeToProto } from './graph/ir.js';
export { linkGraph, topoOrder, readsOf, type Links } from './graph/links.js';
export { modelBuilder } from './graph/build.js';
export { decodeModel, encodeModel, decodeTensor, decodeMessage, encodeMessage, unknownFieldPaths, CodecError } from './onnx/codec.js';
export type * as proto from './onnx/types.js';
export { DTYPES, dtypeInfo, dtypeName, bytesFor } from './onnx/dtype.js';
export { inferShapes, type ShapeResult, type InferOptions, type ValueShape, type ShapeSource } from './shapes/infer.js';
export { register as registerRules, findRule, registeredOps } from './ops/registry.js';
export type { OpRule, InferCtx, CostCtx, Cost, Known, Const } from './ops/rule.js';
export { costModel, type CostReport, type CostOptions, type NodeCost, type StageCost } from './cost/report.js';
export { analyzeModel, completeShapes } from './cost/analyze.js';
export { costJson, costText, costMarkdown, COST_SCHEMA } from './report/cost.js';
export { OfframpError, type ErrorKind } from './errors.js';
export { VERSION } from './version.js';
