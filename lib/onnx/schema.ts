// Field tables of onnx.proto as of IR version 11 (ONNX 1.18): every message and
// field of the current standard, so decoding keeps all of them. Fields a future
// standard adds land in `$unknown` and are written back byte for byte.

export type Scalar = 'string' | 'bytes' | 'int64' | 'uint64' | 'int32' | 'float' | 'double';
export interface Field {
  no: number;
  name: string;
  type: Scalar | `msg:${string}`;
  repeated?: boolean;
  /** Written packed (the spec's `[packed = true]`); reading accepts both forms. */
  packed?: boolean;
}

const f = (no: number, name: string, type: Field['type'], extra: Partial<Field> = {}): Field => ({ no, name, type, ...extra });
const rep = { repeated: true };
const packed = { repeated: true, packed: true };

export const SCHEMA: Record<string, Field[]> = {
  ModelProto: [
    f(1, 'irVersion', 'int64'), f(8, 'opsetImport', 'msg:OperatorSetIdProto', rep),
    f(2, 'producerName', 'string'), f(3, 'producerVersion', 'string'), f(4, 'domain', 'string'),
    f(5, 'modelVersion', 'int64'), f(6, 'docString', 'string'), f(7, 'graph', 'msg:GraphProto'),
    f(14, 'metadataProps', 'msg:StringStringEntryProto', rep), f(20, 'trainingInfo', 'msg:TrainingInfoProto', rep),
    f(25, 'functions', 'msg:FunctionProto', rep), f(26, 'configuration', 'msg:DeviceConfigurationProto', rep),
  ],
  OperatorSetIdProto: [f(1, 'domain', 'string'), f(2, 'version', 'int64')],
  StringStringEntryProto: [f(1, 'key', 'string'), f(2, 'value', 'string')],
  TensorAnnotation: [f(1, 'tensorName', 'string'), f(2, 'quantParameterTensorNames', 'msg:StringStringEntryProto', rep)],
  TrainingInfoProto: [
    f(1, 'initialization', 'msg:GraphProto'), f(2, 'algorithm', 'msg:GraphProto'),
    f(3, 'initializationBinding', 'msg:StringStringEntryProto', rep), f(4, 'updateBinding', 'msg:StringStringEntryProto', rep),
  ],
  GraphProto: [
    f(1, 'node', 'msg:NodeProto', rep), f(2, 'name', 'string'), f(5, 'initializer', 'msg:TensorProto', rep),
    f(15, 'sparseInitializer', 'msg:SparseTensorProto', rep), f(10, 'docString', 'string'),
    f(11, 'input', 'msg:ValueInfoProto', rep), f(12, 'output', 'msg:ValueInfoProto', rep),
    f(13, 'valueInfo', 'msg:ValueInfoProto', rep), f(14, 'quantizationAnnotation', 'msg:TensorAnnotation', rep),
    f(16, 'metadataProps', 'msg:StringStringEntryProto', rep),
  ],
  NodeProto: [
    f(1, 'input', 'string', rep), f(2, 'output', 'string', rep), f(3, 'name', 'string'), f(4, 'opType', 'string'),
    f(7, 'domain', 'string'), f(8, 'overload', 'string'), f(5, 'attribute', 'msg:AttributeProto', rep),
    f(6, 'docString', 'string'), f(9, 'metadataProps', 'msg:StringStringEntryProto', rep),
    f(10, 'deviceConfigurations', 'msg:NodeDeviceConfigurationProto', rep),
  ],
  AttributeProto: [
    f(1, 'name', 'string'), f(21, 'refAttrName', 'string'), f(13, 'docString', 'string'), f(20, 'type', 'int32'),
    f(2, 'f', 'float'), f(3, 'i', 'int64'), f(4, 's', 'bytes'), f(5, 't', 'msg:TensorProto'), f(6, 'g', 'msg:GraphProto'),
    f(22, 'sparseTensor', 'msg:SparseTensorProto'), f(14, 'tp', 'msg:TypeProto'),
    f(7, 'floats', 'float', rep), f(8, 'ints', 'int64', rep), f(9, 'strings', 'bytes', rep),
    f(10, 'tensors', 'msg:TensorProto', rep), f(11, 'graphs', 'msg:GraphProto', rep),
    f(23, 'sparseTensors', 'msg:SparseTensorProto', rep), f(15, 'typeProtos', 'msg:TypeProto', rep),
  ],
  ValueInfoProto: [
    f(1, 'name', 'string'), f(2, 'type', 'msg:TypeProto'), f(3, 'docString', 'string'),
    f(4, 'metadataProps', 'msg:StringStringEntryProto', rep),
  ],
  TensorProto: [
    f(1, 'dims', 'int64', rep), f(2, 'dataType', 'int32'), f(3, 'segment', 'msg:TensorProto.Segment'),
    f(4, 'floatData', 'float', packed), f(5, 'int32Data', 'int32', packed), f(6, 'stringData', 'bytes', rep),
    f(7, 'int64Data', 'int64', packed), f(8, 'name', 'string'), f(12, 'docString', 'string'),
    f(9, 'rawData', 'bytes'), f(13, 'externalData', 'msg:StringStringEntryProto', rep), f(14, 'dataLocation', 'int32'),
    f(10, 'doubleData', 'double', packed), f(11, 'uint64Data', 'uint64', packed),
    f(16, 'metadataProps', 'msg:StringStringEntryProto', rep),
  ],
  'TensorProto.Segment': [f(1, 'begin', 'int64'), f(2, 'end', 'int64')],
  SparseTensorProto: [f(1, 'values', 'msg:TensorProto'), f(2, 'indices', 'msg:TensorProto'), f(3, 'dims', 'int64', rep)],
  TensorShapeProto: [f(1, 'dim', 'msg:TensorShapeProto.Dimension', rep)],
  'TensorShapeProto.Dimension': [f(1, 'dimValue', 'int64'), f(2, 'dimParam', 'string'), f(3, 'denotation', 'string')],
  TypeProto: [
    f(1, 'tensorType', 'msg:TypeProto.Tensor'), f(4, 'sequenceType', 'msg:TypeProto.Sequence'),
    f(5, 'mapType', 'msg:TypeProto.Map'), f(9, 'optionalType', 'msg:TypeProto.Optional'),
    f(8, 'sparseTensorType', 'msg:TypeProto.SparseTensor'), f(7, 'opaqueType', 'msg:TypeProto.Opaque'),
    f(6, 'denotation', 'string'),
  ],
  'TypeProto.Tensor': [f(1, 'elemType', 'int32'), f(2, 'shape', 'msg:TensorShapeProto')],
  'TypeProto.Sequence': [f(1, 'elemType', 'msg:TypeProto')],
  'TypeProto.Map': [f(1, 'keyType', 'int32'), f(2, 'valueType', 'msg:TypeProto')],
  'TypeProto.Optional': [f(1, 'elemType', 'msg:TypeProto')],
  'TypeProto.SparseTensor': [f(1, 'elemType', 'int32'), f(2, 'shape', 'msg:TensorShapeProto')],
  'TypeProto.Opaque': [f(1, 'domain', 'string'), f(2, 'name', 'string')],
  FunctionProto: [
    f(1, 'name', 'string'), f(4, 'input', 'string', rep), f(5, 'output', 'string', rep), f(6, 'attribute', 'string', rep),
    f(11, 'attributeProto', 'msg:AttributeProto', rep), f(7, 'node', 'msg:NodeProto', rep), f(8, 'docString', 'string'),
    f(9, 'opsetImport', 'msg:OperatorSetIdProto', rep), f(10, 'domain', 'string'), f(13, 'overload', 'string'),
    f(12, 'valueInfo', 'msg:ValueInfoProto', rep), f(14, 'metadataProps', 'msg:StringStringEntryProto', rep),
  ],
  DeviceConfigurationProto: [f(1, 'name', 'string'), f(2, 'numDevices', 'int32'), f(3, 'device', 'string', rep)],
  NodeDeviceConfigurationProto: [
    f(1, 'configurationId', 'string'), f(2, 'shardingSpec', 'msg:ShardingSpecProto', rep), f(3, 'pipelineStage', 'int32'),
  ],
  ShardingSpecProto: [
    f(1, 'tensorName', 'string'), f(2, 'device', 'int64', rep),
    f(3, 'indexToDeviceGroupMap', 'msg:IntIntListEntryProto', rep), f(4, 'shardedDim', 'msg:ShardedDimProto', rep),
  ],
  ShardedDimProto: [f(1, 'axis', 'int64'), f(2, 'simpleSharding', 'msg:SimpleShardedDimProto', rep)],
  SimpleShardedDimProto: [f(1, 'dimValue', 'int64'), f(2, 'dimParam', 'string'), f(3, 'numShards', 'int64')],
  IntIntListEntryProto: [f(1, 'key', 'int64'), f(2, 'value', 'int64', rep)],
};
