"""A tiny seeded PyTorch training run for FollowTests: a small MLP over four dense inputs and one embedded id,
written with hooks/driftwatch_follow.py, plus a reference attribution computed by PyTorch's own autograd.

Usage: python3 train_small_run.py HELPER_DIR RUN_FOLDER REFERENCE_EPOCH STEPS EPOCHS REFERENCE_CSV
"""
import csv
import sys

import torch

helper_dir, folder = sys.argv[1], sys.argv[2]
reference_epoch, steps, epochs, reference_path = int(sys.argv[3]), int(sys.argv[4]), int(sys.argv[5]), sys.argv[6]
sys.path.insert(0, helper_dir)
from driftwatch_follow import RunFolderWriter, dense, categorical

torch.manual_seed(7)
torch.set_num_threads(1)
levels, width = 6, 3

def make(rows):
    x = torch.randn(rows, 4)
    bay = torch.randint(0, levels, (rows, 1))
    effect = torch.tensor([0.8, -0.6, 0.0, 1.2, -1.0, 0.3])[bay[:, 0]]
    logit = 1.5 * x[:, 0] - 1.0 * x[:, 1] + effect + 0.3 * torch.randn(rows)
    return x, bay, (logit > 0).float()

train_x, train_c, train_y = make(256)
val_x, val_c, val_y = make(128)

class Model(torch.nn.Module):
    def __init__(self):
        super().__init__()
        self.bay = torch.nn.Embedding(levels, width)
        self.body = torch.nn.Sequential(torch.nn.Linear(4 + width, 16), torch.nn.Tanh(), torch.nn.Linear(16, 1))

    @torch.jit.export
    def encode(self, dense: torch.Tensor, cats: torch.Tensor) -> torch.Tensor:
        return torch.cat([dense, self.bay(cats[:, 0])], dim=1)

    @torch.jit.export
    def score(self, features: torch.Tensor) -> torch.Tensor:
        return self.body(features)

    @torch.jit.export
    def score_after_entry(self, entry: torch.Tensor) -> torch.Tensor:
        return self.body[2](self.body[1](entry))

    def forward(self, dense: torch.Tensor, cats: torch.Tensor) -> torch.Tensor:
        return self.score(self.encode(dense, cats))

model = Model()
optimiser = torch.optim.Adam(model.parameters(), lr=0.02)
loss_fn = torch.nn.BCEWithLogitsLoss()
features = [dense("x0"), dense("x1"), dense("x2"), dense("x3"), categorical("bay", width)]
probe_held = (val_x[:32], val_c[:32], val_y[:32])
probe_train = (train_x[:32], train_c[:32], train_y[:32])

def integrated_gradients(m, d, c):
    # Integrated Gradients (Sundararajan, Taly, Yan 2017, eq. 3) with the midpoint rule, a zero baseline and the
    # logit as output, every gradient from torch.autograd; the embedding's columns are summed into one feature.
    with torch.no_grad():
        x = m.encode(d, c)
    total = torch.zeros_like(x)
    for k in range(steps):
        point = ((k + 0.5) / steps * x).detach().requires_grad_(True)
        out = m.score(point)[:, 0].sum()
        (g,) = torch.autograd.grad(out, point)
        total += g
    cols = total / steps * x
    return torch.cat([cols[:, :4], cols[:, 4:].sum(dim=1, keepdim=True)], dim=1)

with RunFolderWriter(folder, features, probe_held, probe_train, training_cats=train_c, entry_layer="body.0") as run:
    for epoch in range(1, epochs + 1):
        model.train()
        for start in range(0, 256, 32):
            optimiser.zero_grad()
            loss = loss_fn(model(train_x[start:start + 32], train_c[start:start + 32])[:, 0], train_y[start:start + 32])
            loss.backward()
            optimiser.step()
        model.eval()
        with torch.no_grad():
            train_loss = loss_fn(model(train_x, train_c)[:, 0], train_y).item()
            val_loss = loss_fn(model(val_x, val_c)[:, 0], val_y).item()
        run.end_epoch(model, epoch, train_loss=train_loss, validation_loss=val_loss, accuracy=0.5)
        if epoch == reference_epoch:
            d = torch.cat([probe_held[0], probe_train[0]])
            c = torch.cat([probe_held[1], probe_train[1]])
            ig = integrated_gradients(model, d, c)
            with open(reference_path, "w", newline="") as f:
                w = csv.writer(f)
                for row in ig.tolist():
                    w.writerow([repr(v) for v in row])
