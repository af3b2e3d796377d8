// The C a firmware compiles: the fixed decision library (lib/emit/c/: offramp_decide.{h,c},
// offramp_chain.h, real C files copied as they are) and, generated from the manifest,
// offramp_config.h (the sizes the library is compiled for), offramp_policy.h / offramp_policy.c
// (the stage table and the chosen policy as constants). Output depends only on the manifest,
// the policy and the paths given (no timestamps), so the same inputs give the same bytes.
import fs from 'node:fs';
import path from 'node:path';
import { shippedPath } from '../util/shipped.js';
import { OfframpError } from '../errors.js';
import { chainFor, checkPolicy, fullModel, isStream, type FramePolicy, type Policy } from '../policy/index.js';
import { VERSION } from '../version.js';
import type { Manifest } from '../split/manifest.js';
import { chainTable, type ChainTable, type TableTensor } from './table.js';

export const C_HEADER = 'offramp_policy.h';
export const C_SOURCE = 'offramp_policy.c';
export const C_CONFIG = 'offramp_config.h';
/** The library files, the same for every model. */
export const C_FIXED = ['offramp_chain.h', 'offramp_decide.h', 'offramp_decide.c'] as const;
/** Every file emit-c writes (generated first). */
export const C_FILES = [C_HEADER, C_SOURCE, C_CONFIG, ...C_FIXED] as const;

/**
 * Where the library files are: lib/emit/c beside this module when run from the sources, or the
 * package's lib/emit/c from the compiled dist/lib/emit.
 */
export function cLibraryDir(): string {
  const dir = shippedPath('emit/c', "offramp's C decision library") + path.sep;
  const missing = C_FIXED.filter((f) => !fs.existsSync(dir + f));
  if (missing.length) throw new OfframpError('io', `offramp's C library files (${missing.join(', ')}) are missing: the installation is incomplete`, dir);
  return dir;
}

/** The library files' text, as they are. */
export function cLibraryFiles(): { name: string; text: string }[] {
  const dir = cLibraryDir();
  return C_FIXED.map((name) => ({ name, text: fs.readFileSync(dir + name, 'utf8') }));
}

export interface EmitCInput {
  manifest: Manifest;
  /** the manifest as the banner names it (relative to the output folder) */
  manifestName: string;
  manifestSha256: string;
  policy: Policy;
  /** where the policy came from, for the banner */
  policyFrom: string;
  /** the file the policy was read from, for errors (default: the manifest) */
  policyFile?: string;
}
export interface EmitCOutput { table: ChainTable; files: { name: string; text: string }[] }

/** The exact double as a C99 hexadecimal floating constant. */
export function hexDouble(x: number): string {
  if (!Number.isFinite(x)) throw new OfframpError('data', `not a finite number: ${x}`);
  if (x === 0) return Object.is(x, -0) ? '-0.0' : '0.0';
  const b = new DataView(new ArrayBuffer(8));
  b.setFloat64(0, x);
  const hi = b.getUint32(0), lo = b.getUint32(4);
  const sign = hi >>> 31 ? '-' : '';
  const e = (hi >>> 20) & 0x7ff;
  const mant = ((BigInt(hi & 0xfffff) << 32n) | BigInt(lo)).toString(16).padStart(13, '0').replace(/0+$/, '');
  return `${sign}0x${e ? '1' : '0'}${mant ? `.${mant}` : ''}p${e ? e - 1023 : -1022}`;
}

/** The float32 nearest x as a C99 hexadecimal floating constant of type float (`0x1.99999ap-4f`). */
export function hexFloat(x: number): string {
  const v = Math.fround(x);
  if (!Number.isFinite(v)) throw new OfframpError('data', `not a finite float32: ${x}`);
  if (v === 0) return Object.is(v, -0) ? '-0.0f' : '0.0f';
  const b = new DataView(new ArrayBuffer(4));
  b.setFloat32(0, v);
  const u = b.getUint32(0);
  const e = (u >>> 23) & 0xff;
  const mant = ((u & 0x7fffff) << 1).toString(16).padStart(6, '0').replace(/0+$/, '');
  return `${u >>> 31 ? '-' : ''}0x${e ? '1' : '0'}${mant ? `.${mant}` : ''}p${e ? e - 127 : -126}f`;
}

/** A C string literal: printable ASCII kept, the rest (and ? against trigraphs) as octal escapes of the UTF-8 bytes. */
export function cString(s: string): string {
  let out = '"';
  for (const byte of Buffer.from(s, 'utf8')) {
    const c = String.fromCharCode(byte);
    out += byte >= 0x20 && byte < 0x7f && c !== '"' && c !== '\\' && c !== '?' ? c : `\\${byte.toString(8).padStart(3, '0')}`;
  }
  return out + '"';
}

const comment = (s: string) => s.replace(/\*\//g, '* /');
const u64 = (v: bigint) => `UINT64_C(${v})`;
const SCORE_C = { confidence: 'OFFRAMP_CONFIDENCE', entropy: 'OFFRAMP_ENTROPY', margin: 'OFFRAMP_MARGIN' } as const;
const KIND_C: Record<Policy['kind'], string> = { ...SCORE_C, patience: 'OFFRAMP_PATIENCE', budget: 'OFFRAMP_BUDGET', difference: 'OFFRAMP_DIFFERENCE', agreeing: 'OFFRAMP_AGREEING' };
const DIST_C = { l1: 'OFFRAMP_L1', l2: 'OFFRAMP_L2', cosine: 'OFFRAMP_COSINE', js: 'OFFRAMP_JS' } as const;

/** The policy's JSON with keys in a fixed order, for the banner. */
function policyJson(p: Policy): string {
  const frame = (f: FramePolicy): Record<string, unknown> => ({
    kind: f.kind, thresholds: f.thresholds,
    ...(f.kind === 'patience' && { patience: f.patience }),
    ...(f.kind === 'budget' && { budget: f.budget, ...(f.score && { score: f.score }) }),
  });
  if (!isStream(p)) return JSON.stringify(frame(p));
  return JSON.stringify({ kind: p.kind, thresholds: p.thresholds, distance: p.distance, ...(p.exit !== undefined && { exit: p.exit }), ...(p.then && { then: frame(p.then) }), ...(p.refresh !== undefined && { refresh: p.refresh }) });
}

/** A threshold as the float the C compares with (lib/policy compares the same float32), its JSON value beside it. */
const floatConstant = (x: number | null): string => (x === null ? '0.0f' : `${hexFloat(x)} /* ${x}${Math.fround(x) === x ? '' : ' as float'} */`);

function framePolicyInit(p: FramePolicy, t: ChainTable, indent: string): string {
  const reach = t.reach.map(Number);
  const cap = chainFor(p, reach, t.exits, t.classes).cap;
  const score = p.kind === 'patience' ? 'OFFRAMP_NO_SCORE' : p.kind === 'budget' ? (p.score ? SCORE_C[p.score] : 'OFFRAMP_NO_SCORE') : SCORE_C[p.kind];
  // one slot per exit and one for the final output (never decided at: there so that 0 exits is valid C)
  const th = Array.from({ length: t.exits + 1 }, (_, k) => (score === 'OFFRAMP_NO_SCORE' || k === t.exits ? null : p.thresholds[k] ?? null));
  const why = p.kind === 'budget' ? ` /* budget ${p.budget} MAC-equivalents: deepest affordable exit */` : '';
  return [
    `{`,
    `${indent}  ${KIND_C[p.kind]}, ${score}, ${p.kind === 'patience' ? p.patience : 0}, ${cap},${why}`,
    `${indent}  { ${th.map((x) => (x === null ? 0 : 1)).join(', ')} },`,
    `${indent}  { ${th.map(floatConstant).join(', ')} }`,
    `${indent}}`,
  ].join('\n');
}

function policyDefinition(p: Policy, t: ChainTable): string {
  if (!isStream(p)) return `const offramp_frame_policy_t offramp_policy = ${framePolicyInit(p, t, '')};\n`;
  const then = p.then ?? fullModel(t.exits);
  return [
    `const offramp_stream_policy_t offramp_policy = {`,
    `  ${KIND_C[p.kind]}, ${DIST_C[p.distance]}, ${floatConstant(p.thresholds[0])}, ${p.kind === 'difference' ? p.exit : -1}, ${p.refresh ?? 0},${p.refresh === undefined ? ' /* no refresh */' : ` /* refresh: final output at least every ${p.refresh} frames */`}`,
    `  ${framePolicyInit(then, t, '  ')}`,
    `};`, '',
  ].join('\n');
}

function banner(file: string, i: EmitCInput): string {
  return [
    `/* ${file}: generated by offramp ${VERSION}; do not edit, run offramp emit-c again.`,
    ` * manifest: ${comment(i.manifestName)} (sha256 ${i.manifestSha256})`,
    ` * policy (${comment(i.policyFrom)}): ${comment(policyJson(i.policy))}`,
    ` * C99, no allocation, no libm, no double; compile with offramp_decide.c as ISO C (-std=c99) or with`,
    ` * -ffp-contract=off, and decisions equal offramp's own bit for bit (offramp_decide.h says why). */`,
    '',
  ].join('\n');
}

export function emitC(i: EmitCInput, file?: string): EmitCOutput {
  const t = chainTable(i.manifest, file);
  let policy: Policy;
  try { policy = checkPolicy(i.policy, t.exits, 'policy'); } catch (e) {
    throw e instanceof OfframpError ? new OfframpError(e.kind, e.message, i.policyFile ?? file, e.where) : e;
  }
  const stream = isStream(policy);
  // offramp_decide.h reads the sizes it is compiled for from here (a firmware generator of its own may write it instead).
  const config = [
    banner(C_CONFIG, i),
    '#ifndef OFFRAMP_CONFIG_H', '#define OFFRAMP_CONFIG_H', '',
    `#define OFFRAMP_EXITS ${t.exits}            /* early exits; index OFFRAMP_EXITS is the final output */`,
    `#define OFFRAMP_CLASSES ${t.classes}`,
    '', '#endif', '',
  ].join('\n');
  const header = [
    banner(C_HEADER, i),
    '#ifndef OFFRAMP_POLICY_H', '#define OFFRAMP_POLICY_H', '', '#include <stdint.h>', `#include "${C_CONFIG}"`, '#include "offramp_chain.h"', '#include "offramp_decide.h"', '',
    `#define OFFRAMP_STAGES ${t.stages.length}`,
    `#define OFFRAMP_TENSORS ${t.stages.reduce((a, s) => a + s.inputs.length + s.outputs.length, 0)}`,
    `#define OFFRAMP_BUFFERS ${t.stages.reduce((a, s) => a + s.buffers.length, 0)}          /* arena buffers of all stages */`,
    `#define OFFRAMP_ARENA_BYTES ${t.stages.reduce((a, s) => Math.max(a, s.arenaBytes), 0)}u    /* the largest stage arena: one block serves every stage in turn */`,
    `#define OFFRAMP_ARENA_ALIGN ${t.arenaAlign}u     /* every arena offset is a multiple of this; align the block itself so (0: no arena plan) */`,
    `#define OFFRAMP_POLICY_STREAM ${stream ? 1 : 0}`,
    `#define OFFRAMP_POLICY_KIND ${KIND_C[policy.kind]}`,
    '',
    '/* The chain, in execution order. */',
    'extern const offramp_tensor_t offramp_tensors[OFFRAMP_TENSORS];',
    'extern const offramp_stage_t offramp_stages[OFFRAMP_STAGES];',
    'extern const offramp_buffer_t offramp_buffers[OFFRAMP_BUFFERS + 1];   /* the last entry is an empty end mark */',
    'extern const char *const offramp_exit_names[OFFRAMP_EXITS + 1];',
    'extern const int32_t offramp_exit_stage[OFFRAMP_EXITS + 1];   /* stage that makes exit k */',
    'extern const uint64_t offramp_reach[OFFRAMP_EXITS + 1];       /* MACs to have exit k */',
    ...(t.exitQ8 ? ['#define OFFRAMP_INT8_LOGITS 1', 'extern const offramp_q8_t offramp_exit_q8[OFFRAMP_EXITS + 1];   /* int8 logits of exit k: scale, zero point (for the _q8 functions) */'] : []),
    '',
    '/* The chosen policy. */',
    `extern const ${stream ? 'offramp_stream_policy_t' : 'offramp_frame_policy_t'} offramp_policy;`,
    '', '#endif', '',
  ].join('\n');

  const tensors: string[] = [];
  const stages: string[] = [];
  const buffers: string[] = [];
  const sum = (l: TableTensor[], f: (x: TableTensor) => number) => l.reduce((a, x) => a + f(x), 0);
  for (const [si, s] of t.stages.entries()) {
    const first = tensors.length;
    for (const x of [...s.inputs, ...s.outputs]) tensors.push(`  { ${cString(x.name)}, ${cString(x.dtype)}, ${x.elements}u, ${x.bytes}u, ${x.offset === undefined ? 'OFFRAMP_NO_OFFSET' : `${x.offset}u`} },`);
    const firstBuffer = buffers.length;
    for (const b of s.buffers) buffers.push(`  { ${cString(b.name)}, ${b.offset}u, ${b.bytes}u, ${b.first}u, ${b.last}u },`);
    const inE = sum(s.inputs, (x) => x.elements), inB = sum(s.inputs, (x) => x.bytes), outE = sum(s.outputs, (x) => x.elements), outB = sum(s.outputs, (x) => x.bytes);
    if ([inE, inB, outE, outB].some((v) => v > 0xffffffff)) throw new OfframpError('data', 'tensors over 4 GiB', file, `stages[${si}]`);
    stages.push(`  { ${cString(s.file)}, ${u64(s.macs)}, ${first}u, ${s.inputs.length}u, ${first + s.inputs.length}u, ${s.outputs.length}u, ` +
      `${inE}u, ${inB}u, ${outE}u, ${outB}u, ${s.weightBytes}u, ${s.peakActivationBytes}u, ${s.arenaBytes}u, ${firstBuffer}u, ${s.buffers.length}u, ` +
      `${s.exits.length ? s.exits[0] : -1}, ${s.exits.length} },`);
  }
  const source = [
    banner(C_SOURCE, i),
    `#include "${C_HEADER}"`, '',
    'const offramp_tensor_t offramp_tensors[OFFRAMP_TENSORS] = {', ...tensors, '};', '',
    '/* file, MACs, inputs (first, count), outputs (first, count), input elements, bytes, output elements, bytes, weight bytes, peak activation bytes, arena bytes, buffers (first, count), exits (first, count) */',
    'const offramp_stage_t offramp_stages[OFFRAMP_STAGES] = {', ...stages, '};', '',
    '/* name, arena offset, bytes, first and last node of the stage file that need it */',
    'const offramp_buffer_t offramp_buffers[OFFRAMP_BUFFERS + 1] = {', ...buffers, '  { 0, 0u, 0u, 0u, 0u }', '};', '',
    `const char *const offramp_exit_names[OFFRAMP_EXITS + 1] = { ${[...t.exitNames, t.finalOutput].map(cString).join(', ')} };`,
    `const int32_t offramp_exit_stage[OFFRAMP_EXITS + 1] = { ${t.exitStage.join(', ')} };`,
    `const uint64_t offramp_reach[OFFRAMP_EXITS + 1] = { ${t.reach.map(u64).join(', ')} };`,
    // The scales are float32 values (the manifest's, as the QDQ files store them): the hex constant is exact.
    ...(t.exitQ8 ? [`const offramp_q8_t offramp_exit_q8[OFFRAMP_EXITS + 1] = { ${t.exitQ8.map((q) => `{ ${hexFloat(q.scale)} /* ${q.scale} */, ${q.zeroPoint} }`).join(', ')} };`] : []),
    '',
    policyDefinition(policy, t),
  ].join('\n');
  return { table: t, files: [{ name: C_HEADER, text: header }, { name: C_SOURCE, text: source }, { name: C_CONFIG, text: config }, ...cLibraryFiles()] };
}
