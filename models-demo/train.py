#!/usr/bin/python3
# INVENTED DEMO SCENARIO: trains the fan-condition classifier of models-demo/ on
# spectrograms written by scripts/demo-data.ts (run `npm run demo:data` first).
# Run once with Debian's python3-torch; the exported ONNX file is committed, so
# neither the demo nor the tests need PyTorch.
#   /usr/bin/python3 models-demo/train.py models-demo/data models-demo/fan-monitor.onnx
import json, sys, hashlib
import numpy as np
import torch
import torch.nn as nn

SEED = 20261202
EPOCHS = 10
torch.manual_seed(SEED)
np.random.seed(SEED)
torch.set_num_threads(1)
torch.use_deterministic_algorithms(True)

data, out = sys.argv[1], sys.argv[2]
load = lambda n: np.load(f"{data}/{n}.npy")
xtr, ytr = torch.from_numpy(load("train-x")), torch.from_numpy(load("train-y"))
xva, yva = torch.from_numpy(load("val-x")), torch.from_numpy(load("val-y"))


def block(cin, cout, pool=True):
    layers = [nn.Conv2d(cin, cout, 3, padding=1), nn.BatchNorm2d(cout), nn.ReLU()]
    return nn.Sequential(*layers, nn.MaxPool2d(2)) if pool else nn.Sequential(*layers)


class FanNet(nn.Module):
    def __init__(self, classes=5):
        super().__init__()
        self.b1, self.b2, self.b3, self.b4 = block(1, 8), block(8, 16), block(16, 32), block(32, 64, pool=False)
        self.pool = nn.AdaptiveAvgPool2d(1)
        self.fc = nn.Linear(64, classes)

    def forward(self, x):
        x = self.b4(self.b3(self.b2(self.b1(x))))
        return self.fc(torch.flatten(self.pool(x), 1))


net = FanNet()
opt = torch.optim.Adam(net.parameters(), lr=3e-3)
lossf = nn.CrossEntropyLoss()
sched = torch.optim.lr_scheduler.CosineAnnealingLR(opt, EPOCHS)  # settles the last epochs
g = torch.Generator().manual_seed(SEED)
for epoch in range(EPOCHS):
    net.train()
    perm = torch.randperm(len(xtr), generator=g)
    for i in range(0, len(xtr), 64):
        idx = perm[i:i + 64]
        opt.zero_grad()
        loss = lossf(net(xtr[idx]), ytr[idx])
        loss.backward()
        opt.step()
    sched.step()
    net.eval()
    with torch.no_grad():
        acc = (net(xva).argmax(1) == yva).float().mean().item()
    print(f"epoch {epoch}: loss {loss.item():.4f}, validation accuracy {acc:.4f}")

net.eval()
torch.onnx.export(net, torch.zeros(1, 1, 32, 32), out, input_names=["spectrogram"], output_names=["logits"],
                  dynamic_axes={"spectrogram": {0: "batch"}, "logits": {0: "batch"}}, opset_version=13, do_constant_folding=True)
with torch.no_grad():
    acc = (net(xva).argmax(1) == yva).float().mean().item()
sha = hashlib.sha256(open(out, "rb").read()).hexdigest()
json.dump({"validationAccuracy": round(acc, 6), "seed": SEED, "epochs": EPOCHS, "torch": torch.__version__, "sha256": sha},
          open(out.replace(".onnx", ".json"), "w"), indent=2)
print(f"wrote {out}: validation accuracy {acc:.4f}")
