// `offramp/internals`: the building blocks under the public API (codec, IR and passes, operator
// rules, cuts, heads, fitting, policy and certification math, the arena planner, int8 arithmetic).
// No stability promise: names and signatures here change with the pipeline. The stable entry points
// are the root export (lib/index.ts, documented in docs/api.md), which this module also repeats so
// that one import can reach both.
export * from './index.js';
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
export { planArena, ARENA_ALIGN, type ArenaPlan, type ArenaMethod, type Slot } from './cost/arena.js';
export { liveRanges, peakOver, type LiveValue } from './cost/memory.js';
export { costJson, costText, costMarkdown, COST_SCHEMA } from './report/cost.js';
export { OfframpError, type ErrorKind } from './errors.js';
export { VERSION } from './version.js';
export { memoryOrder, memoryOrderOf, reorderModel, reorderGraph, type MemoryOrder, type StageOrder, type MemoryOrderOptions } from './cost/reorder.js';
export { parseBytes, readTargetFile, targetFromJson, resolveTarget, BUILTIN_TARGETS, FROM_MEMORY_RATES, type Target, type TargetOptions, type Ratio, type RateBasis } from './chip/target.js';
export { readMeasuredRates, macsPerCycleText, RATES_SCHEMA, type MeasuredRates } from './chip/rates.js';
export { measuredBudget, cyclesOfInstructions, type MeasuredBudget, type MeasuredFigures } from './chip/measured.js';
export { budgetOf, checkBudget, stageFootprints, CONVENTIONS as BUDGET_CONVENTIONS, type Budget, type StageBudget, type StageFootprint, type Footprint, type Fit, type Over, type Precision, type LatencyBasis } from './chip/budget.js';
export { budgetText, budgetMarkdown, reorderText, reorderMarkdown } from './report/budget.js';
export { scanModel, planCuts, rankCuts, cutsAtFractions, resolveCut, type Cut, type CutPlan } from './cuts/scan.js';
export { exitOutputs, exitCuts } from './cuts/exits.js';
export { graftExits, classifierIO, type GraftOptions, type GraftResult, type DataSource } from './heads/fit-heads.js';
export { exitRecords, type ExitRecord } from './heads/graft.js';
export { npySource, pbSource, readLabels } from './heads/sources.js';
export { readNpy, readNpyHeader, npyBatches, writeNpy, toFloat32 } from './data/npy.js';
export { fitSoftmax } from './fit/softmax.js';
export { writeSplit, writeManifestPolicy, MANIFEST_SCHEMA, type Manifest, type ManifestStage, type ManifestPolicy, type ManifestQuantization } from './split/manifest.js';
export { loadChain, readManifest, type Chain, type ChainResult } from './run/chain.js';
export { checkChain, checkAgreement, type Agreement, type AgreementResult } from './run/check.js';
export { quantizeSplit, DEFAULT_CALIBRATION, type QuantizeOptions, type QuantizeResult } from './quant/split.js';
export { foldBatchNorm } from './quant/fold-bn.js';
export { activationPlan, toQdq, type ActivationPlan, type QdqSpec } from './quant/qdq.js';
export { quantize, dequantize, roundHalfEven, activationParams, quantizeWeights, quantizeBias, type QuantParams } from './quant/linear.js';
export { CALIBRATION_METHODS, type CalibrationMethod } from './quant/calibrate.js';
export { qdqView } from './cost/qdq.js';
export * from './policy/index.js';
export { tune, type TuneResult, type TuneOptions } from './tune/search.js';
export { dropBound, rowsNeeded, fixedSequence, clopperPearsonUpper, clopperPearsonLower, type Guarantee } from './certify/index.js';
export { makeCache, type ExitCache, type ExitCosts } from './tune/cache.js';
export { writeC } from './emit/write.js';
export { emitC } from './emit/c.js';
export { buildExits, type BuildOptions, type BuildResult } from './pipeline/build.js';
export { eliminateDeadCode } from './graph/passes.js';
export { foldShapeSubgraphs } from './shapes/fold.js';
