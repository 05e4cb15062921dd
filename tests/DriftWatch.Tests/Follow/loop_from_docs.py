"""A PyTorch training loop written from docs/pytorch.md alone, for FollowTests: it writes a run folder with
hooks/driftwatch_follow.py and, while ``driftwatch follow`` runs beside it, breaks on the verdict of the epoch it has
just finished.

Usage: python3 loop_from_docs.py HELPER_DIR RUN_FOLDER MODE EPOCHS VERDICT_TIMEOUT

MODE: ``overfit`` (four dense inputs and one embedded id, a tiny training half with noisy labels that a wide network
memorises, so validation loss rises), ``dense-only`` (``held_out=(x, None, y)``) or ``categorical-only``
(``held_out=(None, ids, y)``). Prints one line per epoch, ``epoch N VERDICT kinds``, and ``stopped at N`` when it
breaks on a Halt, ``finished`` otherwise.
"""
import sys

import torch

helper_dir, folder, mode, epochs, timeout = sys.argv[1], sys.argv[2], sys.argv[3], int(sys.argv[4]), float(sys.argv[5])
sys.path.insert(0, helper_dir)
from driftwatch_follow import RunFolderWriter, categorical, dense

torch.manual_seed(11)
torch.set_num_threads(1)
levels, width = 5, 2


def make(rows, noise):
    x = torch.randn(rows, 4)
    plot = torch.randint(0, levels, (rows, 1))
    logit = 1.2 * x[:, 0] - 0.8 * x[:, 1] + torch.tensor([0.6, -0.4, 0.0, 0.9, -0.7])[plot[:, 0]]
    labels = (logit + noise * torch.randn(rows) > 0).float()
    return x, plot, labels


class Model(torch.nn.Module):
    def __init__(self, dense_count, use_plot):
        super().__init__()
        self.use_plot = use_plot
        self.plot = torch.nn.Embedding(levels, width)
        columns = dense_count + (width if use_plot else 0)
        self.body = torch.nn.Sequential(torch.nn.Linear(columns, 64), torch.nn.Tanh(), torch.nn.Linear(64, 1))

    @torch.jit.export
    def encode(self, dense: torch.Tensor, cats: torch.Tensor) -> torch.Tensor:
        if self.use_plot:
            return torch.cat([dense, self.plot(cats[:, 0])], dim=1)
        return dense

    @torch.jit.export
    def score(self, features: torch.Tensor) -> torch.Tensor:
        return self.body(features)

    def forward(self, dense: torch.Tensor, cats: torch.Tensor) -> torch.Tensor:
        return self.score(self.encode(dense, cats))


train_x, train_c, train_y = make(24 if mode == "overfit" else 256, 2.0 if mode == "overfit" else 0.3)
val_x, val_c, val_y = make(128, 0.3)
if mode == "dense-only":
    model = Model(4, False)
    features = [dense("x0"), dense("x1"), dense("x2"), dense("x3")]
    held_out, training = (val_x[:32], None, val_y[:32]), (train_x[:32], None, train_y[:32])
elif mode == "categorical-only":
    model = Model(0, True)
    train_x, val_x = torch.zeros(train_x.shape[0], 0), torch.zeros(val_x.shape[0], 0)
    features = [categorical("plot", width)]
    held_out, training = (None, val_c[:32], val_y[:32]), (None, train_c[:32], train_y[:32])
else:
    model = Model(4, True)
    features = [dense("x0"), dense("x1"), dense("x2"), dense("x3"), categorical("plot", width)]
    held_out, training = (val_x[:32], val_c[:32], val_y[:32]), (train_x[:24], train_c[:24], train_y[:24])

optimiser = torch.optim.Adam(model.parameters(), lr=0.03)
loss_fn = torch.nn.BCEWithLogitsLoss()
with RunFolderWriter(folder, features, held_out, training) as run:
    for epoch in range(1, epochs + 1):
        model.train()
        for _ in range(40):
            optimiser.zero_grad()
            loss = loss_fn(model(train_x, train_c)[:, 0], train_y)
            loss.backward()
            optimiser.step()
        model.eval()
        with torch.no_grad():
            train_loss = loss_fn(model(train_x, train_c)[:, 0], train_y).item()
            validation_loss = loss_fn(model(val_x, val_c)[:, 0], val_y).item()
        verdict = run.end_epoch(model, epoch, train_loss=train_loss, validation_loss=validation_loss, verdict_timeout=timeout)
        print("epoch %d %s %s" % (epoch, verdict.verdict if verdict.arrived else "none", ",".join(verdict.kinds)), flush=True)
        if verdict.halt:
            print("stopped at %d" % epoch, flush=True)
            break
    else:
        print("finished", flush=True)
