// Measuring on an emulated Cortex-M: the library's public surface for it.
export { measureFirmware, type MeasureOptions, type Measurement } from './measure.js';
export { toolchainStatus, requireToolchain, DEBIAN_PACKAGES, type Toolchain, type ToolchainStatus } from './toolchain.js';
export { CORES, UNMEASURABLE, coreOf, type Core, type MeasuredCore } from './cores.js';
export { readCountLog, type Occurrence, type RegionSummary, type RegionKind, type CountLog } from './regions.js';
export { readElf, sizes as elfSizes, type Elf, type ElfSection, type ElfSymbol } from './elf.js';
