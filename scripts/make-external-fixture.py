# A small ResNet-like classifier saved by the ONNX Python library with its weights in one
# external data file (save_as_external_data, all_tensors_to_one_file), as larger exported
# models are. Run once with Debian's python3-onnx and python3-numpy:
#   /usr/bin/python3 scripts/make-external-fixture.py test/fixtures/external
import sys, os
import numpy as np
import onnx
from onnx import helper, TensorProto, numpy_helper

out = sys.argv[1] if len(sys.argv) > 1 else 'test/fixtures/external'
os.makedirs(out, exist_ok=True)
rng = np.random.default_rng(11)
inits, nodes = [], []

def w(name, shape, scale=None):
    fan_in = int(np.prod(shape[1:])) if len(shape) > 1 else 1
    a = rng.normal(0, scale if scale is not None else (2.0 / fan_in) ** 0.5, size=shape).astype(np.float32)
    inits.append(numpy_helper.from_array(a, name))
    return name

def conv_bn(x, name, cin, cout, k, stride, relu=True):
    pad = k // 2
    nodes.append(helper.make_node('Conv', [x, w(f'{name}.w', (cout, cin, k, k))], [f'{name}.c'],
                                  kernel_shape=[k, k], strides=[stride, stride], pads=[pad] * 4, name=f'{name}/Conv'))
    nodes.append(helper.make_node('BatchNormalization', [f'{name}.c', w(f'{name}.g', (cout,), 0.1), w(f'{name}.b', (cout,), 0.1),
                                  w(f'{name}.m', (cout,), 0.1), f'{name}.v'], [f'{name}.bn'], name=f'{name}/BN'))
    inits.append(numpy_helper.from_array(np.abs(rng.normal(1, 0.1, size=(cout,))).astype(np.float32), f'{name}.v'))
    if not relu: return f'{name}.bn'
    nodes.append(helper.make_node('Relu', [f'{name}.bn'], [f'{name}.r'], name=f'{name}/Relu'))
    return f'{name}.r'

def block(x, name, cin, cout, stride):
    h = conv_bn(x, f'{name}.1', cin, cout, 3, stride)
    h = conv_bn(h, f'{name}.2', cout, cout, 3, 1, relu=False)
    skip = x if stride == 1 and cin == cout else conv_bn(x, f'{name}.down', cin, cout, 1, stride, relu=False)
    nodes.append(helper.make_node('Add', [h, skip], [f'{name}.sum'], name=f'{name}/Add'))
    nodes.append(helper.make_node('Relu', [f'{name}.sum'], [f'{name}.out'], name=f'{name}/Relu'))
    return f'{name}.out'

# stem, then two stages of basic blocks (He et al. 2016's layout, scaled down)
x = conv_bn('input', 'stem', 3, 8, 3, 1)
nodes.append(helper.make_node('MaxPool', [x], ['stem.pool'], kernel_shape=[2, 2], strides=[2, 2], name='stem/MaxPool'))
x = block('stem.pool', 'layer1', 8, 8, 1)
x = block(x, 'layer2', 8, 16, 2)
nodes.append(helper.make_node('GlobalAveragePool', [x], ['pool'], name='GlobalAveragePool'))
nodes.append(helper.make_node('Flatten', ['pool'], ['flat'], name='Flatten'))
nodes.append(helper.make_node('Gemm', ['flat', w('fc.w', (10, 16)), w('fc.b', (10,), 0.1)], ['logits'], transB=1, name='fc/Gemm'))

graph = helper.make_graph(nodes, 'resnet_mini', [helper.make_tensor_value_info('input', TensorProto.FLOAT, ['N', 3, 16, 16])],
                          [helper.make_tensor_value_info('logits', TensorProto.FLOAT, ['N', 10])], inits)
model = helper.make_model(graph, opset_imports=[helper.make_opsetid('', 13)], producer_name='make-external-fixture')
model.ir_version = 7
onnx.checker.check_model(model)
onnx.save_model(model, os.path.join(out, 'resnet-mini.onnx'), save_as_external_data=True, all_tensors_to_one_file=True,
                location='resnet-mini.weights', size_threshold=0)
# Inputs for checks: 4 seeded images.
np.save(os.path.join(out, 'resnet-mini-x.npy'), rng.normal(0, 1, size=(4, 3, 16, 16)).astype(np.float32))
