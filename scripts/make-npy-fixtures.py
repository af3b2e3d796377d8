#!/usr/bin/python3
# Writes test/fixtures/npy/: .npy files made by numpy itself (the reference for
# lib/data/npy.ts), plus expected.json with their values. Debian python3-numpy.
#   /usr/bin/python3 scripts/make-npy-fixtures.py
import json, math, os
import numpy as np

OUT = 'test/fixtures/npy'
os.makedirs(OUT, exist_ok=True)
expected = {'numpy': np.__version__, 'files': {}}

def jsonable(x):
    if isinstance(x, (bool, np.bool_)):
        return int(x)
    if isinstance(x, (np.integer, int)):
        v = int(x)
        return str(v) if abs(v) > 2 ** 53 else v
    v = float(x)
    return 'nan' if math.isnan(v) else 'inf' if v == math.inf else '-inf' if v == -math.inf else v

def save(name, a, version=None, note=None):
    path = os.path.join(OUT, name + '.npy')
    with open(path, 'wb') as f:
        np.lib.format.write_array(f, a, version=version, allow_pickle=a.dtype == object)
    if note:
        expected['files'][name] = {'descr': a.dtype.str, 'note': note}
    elif a.dtype.kind in 'fiub':
        expected['files'][name] = {
            'descr': a.dtype.str, 'shape': list(a.shape), 'fortran': bool(a.flags.f_contiguous and not a.flags.c_contiguous),
            'version': list(version or (1, 0)), 'values': [jsonable(x) for x in a.ravel(order='C')],
        }

base = np.arange(12).reshape(3, 4)
save('f4', (base * 0.75 - 3.1).astype('<f4'))
save('f8', np.array([[0.1, -2.5e-300, 1e300, math.pi], [-0.0, 7.0, 1 / 3, -1e-5], [2 ** 53, -2 ** 53, 0.5, 9.75]], dtype='<f8'))
save('i8', np.array([[-2 ** 63, 2 ** 63 - 1, 0, -1], [2 ** 53 + 1, -(2 ** 53) - 1, 42, 7], [1, 2, 3, 4]], dtype='<i8'))
save('i4', np.array([[-2 ** 31, 2 ** 31 - 1, 0, -1], [5, 6, 7, 8], [9, 10, 11, 12]], dtype='<i4'))
save('u1', np.array([[0, 1, 127, 128], [200, 254, 255, 3], [9, 8, 7, 6]], dtype='|u1'))
save('i1', np.array([[-128, 127, 0, -1], [1, -2, 3, -4], [5, -6, 7, -8]], dtype='|i1'))
save('f2', np.array([[0.0, -0.0, 1.0, -2.5], [65504.0, 6e-8, 6.1035e-5, np.inf], [-np.inf, np.nan, 0.333, 1000.5]], dtype='<f2'))
save('b1', np.array([[True, False, True, True], [False, False, True, False], [True, True, False, False]]))
# Format versions 2.0 and 3.0 (u32 header length; 3.0 headers are UTF-8).
save('f4_v2', (base * 0.75 - 3.1).astype('<f4'), version=(2, 0))
save('f4_v3', (base * 0.75 - 3.1).astype('<f4'), version=(3, 0))
# Other ranks, and an empty array.
save('f4_1d', np.array([1.5, -2.0, 3.25, 0.0, 1e-3], dtype='<f4'))
save('f4_0d', np.array(2.5, dtype='<f4'))
save('f4_3d', (np.arange(24).reshape(2, 3, 4) / 8).astype('<f4'))
save('u1_empty', np.zeros((0, 3), dtype='|u1'))
# Enough rows to span many batches, and a labels vector of the usual kind.
save('i4_rows', (np.arange(1000 * 3).reshape(1000, 3) * 7 - 500).astype('<i4'))
save('labels_i8', (np.arange(37) % 10).astype('<i8'))
# Refused layouts and dtypes.
save('fortran', np.asfortranarray((base * 0.5).astype('<f4')), note='refused: Fortran order')
save('big_endian', (base * 0.5).astype('>f4'), note='refused: big-endian')
save('object', np.array([1, 'a', None], dtype=object))
save('unicode', np.array(['ab', 'cd'], dtype='<U2'), note='refused: dtype')
save('complex', np.array([1 + 2j], dtype='<c8'), note='refused: dtype')
save('structured', np.zeros(2, dtype=[('a', '<f4'), ('b', '<i4')]), note='refused: structured')

# One file per line keeps the fixture small and its diffs readable.
del expected['files']['i4_rows']['values']  # i*7 - 500, checked by formula
with open(os.path.join(OUT, 'expected.json'), 'w') as f:
    f.write('{"numpy": %s, "files": {\n' % json.dumps(expected['numpy']))
    f.write(',\n'.join('%s: %s' % (json.dumps(k), json.dumps(v)) for k, v in expected['files'].items()))
    f.write('\n}}\n')
