// Measuring on an emulated Cortex-M: the library's public surface for it.
//
// How a measurement goes (measure.ts):
//   1. toolchain.ts finds arm-none-eabi-gcc/-ar (with newlib-nano), qemu-system-arm and the host gcc;
//      when one is missing, one line names the Debian packages (a usage error: the CLI's exit 2).
//   2. plugin.ts builds harness/plugin/counter.c with the host gcc into the cache folder, once per
//      source hash: a QEMU TCG plugin (API version 1) counting every executed instruction.
//   3. The library's sources are compiled for the core (cores.ts: m4f = mps2-an386, m7 = mps2-an500,
//      m55 = mps3-an547; -O2, -DOFFRAMP_TRACE) into one archive, which the linker script puts into
//      sections of its own (.lib.*), so the ELF tells the library's share of flash and RAM apart from
//      the harness (harness/*.c: reset with the FPU on first, semihosting system calls, exit status
//      through SYS_EXIT_EXTENDED, a painted stack) and the C library.
//   4. QEMU runs the ELF with semihosting; offramp_trace (harness/trace.c) stores into a marker block
//      the plugin watches, and the plugin logs the instruction count at each marker.
//   5. elf.ts reads sections and symbols; regions.ts turns the log into instructions per stage,
//      decision and frame, less the marker's own cost measured on an empty region.
export { measureFirmware, type MeasureOptions, type Measurement } from './measure.js';
export { toolchainStatus, requireToolchain, DEBIAN_PACKAGES, type Toolchain, type ToolchainStatus } from './toolchain.js';
export { CORES, UNMEASURABLE, coreOf, type Core, type MeasuredCore } from './cores.js';
export { readCountLog, frameProfiles, type Occurrence, type RegionSummary, type RegionKind, type CountLog, type FrameProfile } from './regions.js';
export { readElf, sizes as elfSizes, type Elf, type ElfSection, type ElfSymbol } from './elf.js';
