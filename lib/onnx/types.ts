// Decoded onnx.proto messages. A field is present only if the file had it (proto2
// presence). int64 stays exact as bigint; bytes are views into the file buffer.

export interface Unknowns { /** Fields this schema does not know, as raw wire bytes (tag included). */ $unknown?: Uint8Array[] }

export interface StringStringEntryProto extends Unknowns { key?: string; value?: string }
export interface OperatorSetIdProto extends Unknowns { domain?: string; version?: bigint }

export interface ModelProto extends Unknowns {
  irVersion?: bigint; opsetImport?: OperatorSetIdProto[]; producerName?: string; producerVersion?: string;
  domain?: string; modelVersion?: bigint; docString?: string; graph?: GraphProto;
  metadataProps?: StringStringEntryProto[]; trainingInfo?: TrainingInfoProto[]; functions?: FunctionProto[];
  configuration?: DeviceConfigurationProto[];
}
export interface TrainingInfoProto extends Unknowns {
  initialization?: GraphProto; algorithm?: GraphProto;
  initializationBinding?: StringStringEntryProto[]; updateBinding?: StringStringEntryProto[];
}
export interface TensorAnnotation extends Unknowns { tensorName?: string; quantParameterTensorNames?: StringStringEntryProto[] }
export interface GraphProto extends Unknowns {
  node?: NodeProto[]; name?: string; initializer?: TensorProto[]; sparseInitializer?: SparseTensorProto[];
  docString?: string; input?: ValueInfoProto[]; output?: ValueInfoProto[]; valueInfo?: ValueInfoProto[];
  quantizationAnnotation?: TensorAnnotation[]; metadataProps?: StringStringEntryProto[];
}
export interface NodeProto extends Unknowns {
  input?: string[]; output?: string[]; name?: string; opType?: string; domain?: string; overload?: string;
  attribute?: AttributeProto[]; docString?: string; metadataProps?: StringStringEntryProto[];
  deviceConfigurations?: NodeDeviceConfigurationProto[];
}
export enum AttrType {
  UNDEFINED = 0, FLOAT = 1, INT = 2, STRING = 3, TENSOR = 4, GRAPH = 5, FLOATS = 6, INTS = 7, STRINGS = 8,
  TENSORS = 9, GRAPHS = 10, SPARSE_TENSOR = 11, SPARSE_TENSORS = 12, TYPE_PROTO = 13, TYPE_PROTOS = 14,
}
export interface AttributeProto extends Unknowns {
  name?: string; refAttrName?: string; docString?: string; type?: number;
  f?: number; i?: bigint; s?: Uint8Array; t?: TensorProto; g?: GraphProto; sparseTensor?: SparseTensorProto; tp?: TypeProto;
  floats?: Float32Array; ints?: BigInt64Array; strings?: Uint8Array[]; tensors?: TensorProto[]; graphs?: GraphProto[];
  sparseTensors?: SparseTensorProto[]; typeProtos?: TypeProto[];
}
export interface ValueInfoProto extends Unknowns {
  name?: string; type?: TypeProto; docString?: string; metadataProps?: StringStringEntryProto[];
}
export interface TensorProto extends Unknowns {
  dims?: BigInt64Array; dataType?: number; segment?: { begin?: bigint; end?: bigint } & Unknowns;
  floatData?: Float32Array; int32Data?: Int32Array; stringData?: Uint8Array[]; int64Data?: BigInt64Array;
  name?: string; docString?: string; rawData?: Uint8Array; externalData?: StringStringEntryProto[];
  dataLocation?: number; doubleData?: Float64Array; uint64Data?: BigUint64Array; metadataProps?: StringStringEntryProto[];
}
export interface SparseTensorProto extends Unknowns { values?: TensorProto; indices?: TensorProto; dims?: BigInt64Array }
export interface TensorShapeProto extends Unknowns { dim?: DimensionProto[] }
export interface DimensionProto extends Unknowns { dimValue?: bigint; dimParam?: string; denotation?: string }
export interface TypeProto extends Unknowns {
  tensorType?: { elemType?: number; shape?: TensorShapeProto } & Unknowns;
  sequenceType?: { elemType?: TypeProto } & Unknowns;
  mapType?: { keyType?: number; valueType?: TypeProto } & Unknowns;
  optionalType?: { elemType?: TypeProto } & Unknowns;
  sparseTensorType?: { elemType?: number; shape?: TensorShapeProto } & Unknowns;
  opaqueType?: { domain?: string; name?: string } & Unknowns;
  denotation?: string;
}
export interface FunctionProto extends Unknowns {
  name?: string; input?: string[]; output?: string[]; attribute?: string[]; attributeProto?: AttributeProto[];
  node?: NodeProto[]; docString?: string; opsetImport?: OperatorSetIdProto[]; domain?: string; overload?: string;
  valueInfo?: ValueInfoProto[]; metadataProps?: StringStringEntryProto[];
}
export interface DeviceConfigurationProto extends Unknowns { name?: string; numDevices?: number; device?: string[] }
export interface NodeDeviceConfigurationProto extends Unknowns {
  configurationId?: string; shardingSpec?: Record<string, unknown>[]; pipelineStage?: number;
}
