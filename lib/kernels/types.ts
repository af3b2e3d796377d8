// The kernels' parameters: the TypeScript form of the structs in offramp_kernels.h, field for field.
import type { Multiplier } from './requant.js';

export interface ConvParams {
  inC: number; inH: number; inW: number; outC: number; outH: number; outW: number;
  kH: number; kW: number; strideH: number; strideW: number; dilH: number; dilW: number; padTop: number; padLeft: number;
  groups: number;
  inZero: number; outZero: number; lo: number; hi: number;
  /** [outC][inC / groups][kH][kW] */
  weight: Int8Array;
  /** [outC], −inZero · Σw folded in */
  bias: Int32Array;
  mul: Multiplier[];
}

export interface DenseParams {
  in: number; out: number;
  inZero: number; outZero: number; lo: number; hi: number;
  /** [out][in] */
  weight: Int8Array;
  bias: Int32Array;
  mul: Multiplier[];
}

export interface PoolParams {
  c: number; inH: number; inW: number; outH: number; outW: number;
  kH: number; kW: number; strideH: number; strideW: number; dilH: number; dilW: number;
  padTop: number; padLeft: number; padBottom: number; padRight: number;
  includePad: boolean;
  inZero: number; outZero: number; lo: number; hi: number;
  /** AveragePool: by count, [kH · kW + 1]; MaxPool: empty */
  mul: Multiplier[];
}

export interface RescaleParams { n: number; inZero: number; outZero: number; lo: number; hi: number; mul: Multiplier }
