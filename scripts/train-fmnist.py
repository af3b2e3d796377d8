#!/usr/bin/python3
# Trains the small Fashion-MNIST CNN behind test/fixtures/fmnist/ and exports it to ONNX.
# Debian packages: python3-torch, python3-numpy, dataset-fashion-mnist. Run from the repo root:
#   /usr/bin/python3 scripts/train-fmnist.py
# Plain conv stages with no skip connections, so every block boundary is a clean cut.
import gzip, hashlib, json, os, sys, time
import numpy as np
import torch
import torch.nn as nn

DATA = os.environ.get('OFFRAMP_FMNIST', '/usr/share/datasets/fashion-mnist')
OUT = os.environ.get('OFFRAMP_FMNIST_OUT', 'test/fixtures/fmnist')
SEED, EPOCHS, BATCH, LR = 20240, 4, 64, 1e-3

def idx(name):
    # IDX: 2 zero bytes, type code, rank, then big-endian u32 dims, then data.
    with gzip.open(os.path.join(DATA, name), 'rb') as f:
        b = f.read()
    assert b[0] == 0 and b[1] == 0 and b[2] == 0x08, name
    rank = b[3]
    dims = [int.from_bytes(b[4 + 4 * i:8 + 4 * i], 'big') for i in range(rank)]
    return np.frombuffer(b, dtype=np.uint8, offset=4 + 4 * rank).reshape(dims)

def images(name):
    return torch.from_numpy(idx(name).astype(np.float32) / 255.0).unsqueeze(1)  # [N,1,28,28] in [0,1]

def labels(name):
    return torch.from_numpy(idx(name).astype(np.int64))

class Net(nn.Module):
    def __init__(self):
        super().__init__()
        self.b1 = nn.Sequential(nn.Conv2d(1, 16, 3, padding=1), nn.ReLU(), nn.MaxPool2d(2))   # 16x14x14
        self.b2 = nn.Sequential(nn.Conv2d(16, 32, 3, padding=1), nn.ReLU(), nn.MaxPool2d(2))  # 32x7x7
        self.b3 = nn.Sequential(nn.Conv2d(32, 64, 3, padding=1), nn.ReLU(), nn.MaxPool2d(2))  # 64x3x3
        self.head = nn.Sequential(nn.Flatten(), nn.Linear(64 * 3 * 3, 10))
    def forward(self, x):
        return self.head(self.b3(self.b2(self.b1(x))))

def accuracy(model, x, y):
    model.eval()
    with torch.no_grad():
        pred = torch.cat([model(x[i:i + 1000]).argmax(1) for i in range(0, len(x), 1000)])
    return int((pred == y).sum())

def main():
    torch.manual_seed(SEED)
    torch.set_num_threads(1)
    torch.use_deterministic_algorithms(True)
    xtr, ytr = images('train-images-idx3-ubyte.gz'), labels('train-labels-idx1-ubyte.gz')
    xte, yte = images('t10k-images-idx3-ubyte.gz'), labels('t10k-labels-idx1-ubyte.gz')
    model = Net()
    opt = torch.optim.Adam(model.parameters(), lr=LR)
    loss_fn = nn.CrossEntropyLoss()
    gen = torch.Generator().manual_seed(SEED)
    t0 = time.time()
    for epoch in range(EPOCHS):
        model.train()
        perm = torch.randperm(len(xtr), generator=gen)
        total = 0.0
        for i in range(0, len(xtr), BATCH):
            j = perm[i:i + BATCH]
            opt.zero_grad()
            loss = loss_fn(model(xtr[j]), ytr[j])
            loss.backward()
            opt.step()
            total += float(loss) * len(j)
        print(f'epoch {epoch + 1}: loss {total / len(xtr):.4f}, test {accuracy(model, xte, yte) / len(xte):.4f}, {time.time() - t0:.0f}s', file=sys.stderr)
    correct = accuracy(model, xte, yte)
    model.eval()
    os.makedirs(OUT, exist_ok=True)
    onnx_path = os.path.join(OUT, 'cnn.onnx')
    torch.onnx.export(model, torch.zeros(1, 1, 28, 28), onnx_path, opset_version=13, input_names=['input'],
                      output_names=['logits'], dynamic_axes={'input': {0: 'N'}, 'logits': {0: 'N'}}, do_constant_folding=True)
    with torch.no_grad():
        first = model(xte[:4]).tolist()
    with open(onnx_path, 'rb') as f:
        sha = hashlib.sha256(f.read()).hexdigest()
    ref = {
        'source': 'PyTorch eval of the trained model on the 10k Fashion-MNIST test set (scripts/train-fmnist.py)',
        'testAccuracy': correct / len(xte), 'testCorrect': correct, 'testCount': len(xte),
        'seed': SEED, 'epochs': EPOCHS, 'batch': BATCH, 'lr': LR, 'optimizer': 'Adam',
        'torch': torch.__version__, 'numpy': np.__version__, 'opset': 13,
        'input': {'name': 'input', 'shape': ['N', 1, 28, 28], 'scale': '[0,1] = uint8 / 255, no mean/std'},
        'output': 'logits', 'onnxSha256': sha, 'firstLogits': first,
        'params': sum(p.numel() for p in model.parameters()),
    }
    with open(os.path.join(OUT, 'reference.json'), 'w') as f:
        json.dump(ref, f, indent=2)
        f.write('\n')
    print(f'test accuracy {correct / len(xte):.4f}, sha256 {sha}', file=sys.stderr)

if __name__ == '__main__':
    main()
