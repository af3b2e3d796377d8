// The public API, `import { buildExits } from 'offramp'`: the handful of calls a build script makes,
// the same functions the CLI's commands are thin layers over. Each name here is documented in
// docs/api.md, and test/api.test.ts fails when this list and that page differ: a name added here
// needs its section there. Everything else is under `offramp/internals` (lib/internals.ts), without
// a stability promise.

// Errors and version
export { OfframpError, type ErrorKind } from './errors.js';
export { VERSION } from './version.js';

// A model: load it, cost it (MACs, weights, peak activations, arena per stage), judge it on a target
export { loadModel, type LoadedModel, type LoadOptions } from './graph/io.js';
export { analyzeModel } from './cost/analyze.js';
export type { CostReport, CostOptions, StageCost, NodeCost } from './cost/report.js';
export { costText, costJson } from './report/cost.js';
export { resolveTarget, BUILTIN_TARGETS, type Target, type TargetOptions } from './chip/target.js';
export { budgetOf, type Budget, type StageBudget } from './chip/budget.js';

// The whole job: exits placed and fitted, split, tuned, certified, checked, budgeted, C emitted
export { buildExits, type BuildOptions, type BuildResult } from './pipeline/build.js';

// A split folder: run its chain, replay a policy over recorded frames
export { loadChain, readManifest, type Chain, type ChainResult, type RunOptions, type ExitPoint } from './run/chain.js';
export type { Manifest, ManifestPolicy } from './split/manifest.js';
// The tensor type chain.run takes and returns: onnxruntime-node's, so a build script needs no second import.
export { Tensor } from 'onnxruntime-node';
export { chainLayout, type ChainLayout } from './tune/chain-capture.js';
export { readLabels, type LabelExpect } from './data/labels.js';
export { replay, type ReplayResult, type ReplaySummary, type ReplayFrame } from './tune/replay.js';
export type { Policy, FramePolicy, StreamPolicy } from './policy/policy.js';
export type { Guarantee } from './certify/index.js';

// int8 and firmware
export { quantizeSplit, type QuantizeOptions, type QuantizeResult } from './quant/split.js';
export { writeC, type WriteCOptions } from './emit/write.js';
export { writeFirmware, type FirmwareOptions, type FirmwareResult } from './firmware/write.js';

// Measuring the int8 firmware on an emulated Cortex-M (QEMU, arm-none-eabi-gcc).
export { measureDevice, type DeviceOptions, type DeviceReport } from './measure/device.js';
export { toolchainStatus, type ToolchainStatus } from './measure/toolchain.js';
