"""Write a run folder that ``driftwatch follow`` attributes and judges, from any PyTorch training loop.

Standard library and torch only; copy this one file next to your training script.

The model must expose the two steps DriftWatch attributes through, marked ``@torch.jit.export`` so that
``torch.jit.script`` keeps them:

* ``encode(dense, cats)``: dense floats ``[rows, dense]`` and categorical ids ``[rows, categoricals]`` (int64)
  to one feature-space tensor ``[rows, columns]`` (each dense value, and each categorical's embedding vector);
* ``score(features)``: feature space to the output (a logit per row, class scores, or a regression value).

Example::

    import torch
    from driftwatch_follow import RunFolderWriter, dense, categorical

    class Model(torch.nn.Module):
        def __init__(self):
            super().__init__()
            self.bay = torch.nn.Embedding(12, 4)
            self.body = torch.nn.Sequential(torch.nn.Linear(6, 16), torch.nn.ReLU(), torch.nn.Linear(16, 1))

        @torch.jit.export
        def encode(self, dense: torch.Tensor, cats: torch.Tensor) -> torch.Tensor:
            return torch.cat([dense, self.bay(cats[:, 0])], dim=1)

        @torch.jit.export
        def score(self, features: torch.Tensor) -> torch.Tensor:
            return self.body(features)

        def forward(self, dense: torch.Tensor, cats: torch.Tensor) -> torch.Tensor:
            return self.score(self.encode(dense, cats))

    with RunFolderWriter(
            "runs/night-7",
            features=[dense("air_temperature"), dense("humidity"), categorical("bay", width=4)],
            held_out=(val_dense[:128], val_cats[:128], val_labels[:128]),
            training=(train_dense[:128], train_cats[:128], train_labels[:128])) as folder:
        for epoch in range(1, 31):
            train_loss = train_one_epoch(model)
            validation_loss = evaluate(model)
            folder.end_epoch(model, epoch, train_loss=train_loss, validation_loss=validation_loss)

Then, in another shell (or the morning after): ``driftwatch follow runs/night-7 --store runs/store.litedb``.

Optional, when ``score`` applies a ``torch.nn.Linear`` to the features first (``body.0`` above): export the rest of
``score`` as ``score_after_entry(entry)`` and pass ``entry_layer="body.0"``. DriftWatch then walks Integrated
Gradients' path in that layer's output, which gives the same attributions for less work::

        @torch.jit.export
        def score_after_entry(self, entry: torch.Tensor) -> torch.Tensor:
            return self.body[2](self.body[1](entry))

Files written (the run-folder contract, README "Watching a PyTorch run"):

* ``schema.json``: the features in feature-space order, each with its kind and the columns it owns;
* ``probe.csv``: the probe rows (dense columns, categorical ids, label, half), written once;
* ``epoch-0001.pt``, ...: the TorchScript snapshot of each epoch, written under a temporary name and renamed,
  so a reader never sees half a file;
* ``metrics.jsonl``: one JSON object per epoch, appended after that epoch's snapshot is in place;
* ``finished``: written by ``close()``; tells ``follow`` that no more epochs will come.
"""

import csv
import json
import math
import os

import torch

SCHEMA_FILE = "schema.json"
ENTRY_METHOD = "score_after_entry"
PROBE_FILE = "probe.csv"
METRICS_FILE = "metrics.jsonl"
FINISHED_FILE = "finished"
CONTRACT_VERSION = 1


def snapshot_name(epoch):
    """The file name of an epoch's TorchScript snapshot, e.g. ``epoch-0007.pt``."""
    return "epoch-%04d.pt" % epoch


def dense(name):
    """A dense feature: one float input, one feature-space column."""
    return {"name": str(name), "kind": "dense", "width": 1}


def categorical(name, width):
    """A categorical feature: one int64 id input whose embedding owns ``width`` feature-space columns."""
    if int(width) < 1:
        raise ValueError("feature %r: embedding width must be at least 1; got %r" % (name, width))
    return {"name": str(name), "kind": "categorical", "width": int(width)}


class RunFolderWriter:
    """Writes one run folder: the schema and probe rows once, then a snapshot and a metrics line per epoch."""

    def __init__(self, folder, features, held_out, training, target="logit", training_cats=None, entry_layer=None):
        """Prepares ``folder`` (created if missing).

        ``features``: ``dense(...)`` and ``categorical(...)`` entries in the order ``encode`` lays out their columns.
        ``held_out`` and ``training``: ``(dense [rows, dense], cats [rows, categoricals], labels [rows])`` tensors for
        the two halves of the probe set (rows the model does not train on, and rows it trains on).
        ``target``: the attributed output: ``logit``, ``probability``, ``regression`` or ``class N``.
        ``training_cats``: optional, the categorical ids of every training row ``[rows, categoricals]``; the counts of
        each id let DriftWatch recognise identifier-like features (most ids in one to three rows).
        ``entry_layer``: optional, the module path (as ``named_modules()`` names it) of the ``torch.nn.Linear`` that
        ``score`` applies to the features first; the model must then export ``score_after_entry``, the rest of
        ``score``. Checked on the held-out rows at the first epoch.
        """
        self.folder = str(folder)
        self.features = [dict(f) for f in features]
        if not self.features:
            raise ValueError("features is empty; give at least one dense(...) or categorical(...)")
        names = [f["name"] for f in self.features]
        if len(set(names)) != len(names):
            raise ValueError("feature names must be unique; got %r" % names)
        self.target = str(target)
        self.held_out = tuple(_as_tensors(held_out, "held_out"))
        self.training = tuple(_as_tensors(training, "training"))
        self.training_cats = None if training_cats is None else torch.as_tensor(training_cats, dtype=torch.int64)
        self.entry_layer = None if entry_layer is None else str(entry_layer)
        self._first = True
        self._last_epoch = None
        os.makedirs(self.folder, exist_ok=True)

    @property
    def column_count(self):
        """The feature-space width the schema declares."""
        return sum(f["width"] for f in self.features)

    def end_epoch(self, model, epoch, train_loss, validation_loss, **others):
        """Writes the epoch's TorchScript snapshot, then its metrics line. Call once per epoch, epochs increasing."""
        epoch = int(epoch)
        if self._last_epoch is not None and epoch <= self._last_epoch:
            raise ValueError("epoch %d comes after epoch %d; epochs must increase" % (epoch, self._last_epoch))
        was_training = model.training
        model.eval()
        try:
            scripted = torch.jit.script(model)
            if self._first:
                self._check(scripted)
                self._write_schema()
                self._write_probe()
                self._first = False
            final = os.path.join(self.folder, snapshot_name(epoch))
            partial = os.path.join(self.folder, "." + snapshot_name(epoch) + ".partial")
            torch.jit.save(scripted, partial)
            _sync(partial)
            os.replace(partial, final)
        finally:
            model.train(was_training)
        line = {"epoch": epoch, "train_loss": _number(train_loss), "validation_loss": _number(validation_loss)}
        for key, value in others.items():
            line[str(key)] = _number(value)
        with open(os.path.join(self.folder, METRICS_FILE), "a", encoding="utf-8") as stream:
            stream.write(json.dumps(line, allow_nan=False) + "\n")
            stream.flush()
            os.fsync(stream.fileno())
        self._last_epoch = epoch

    def close(self):
        """Marks the run finished, so ``driftwatch follow`` stops once it has judged the last epoch."""
        with open(os.path.join(self.folder, FINISHED_FILE), "w", encoding="utf-8") as stream:
            json.dump({"last_epoch": self._last_epoch}, stream)
            stream.write("\n")

    def __enter__(self):
        return self

    def __exit__(self, kind, value, trace):
        if kind is None:
            self.close()
        return False

    def _check(self, scripted):
        for method in ("encode", "score"):
            if not hasattr(scripted, method):
                raise TypeError(
                    "the model has no TorchScript method %r; define it on the module and mark it @torch.jit.export" % method)
        dense_rows, cats_rows, _ = self.held_out
        with torch.no_grad():
            features = scripted.encode(dense_rows, cats_rows)
            if features.dim() != 2 or features.shape[1] != self.column_count or features.shape[0] != dense_rows.shape[0]:
                raise ValueError("encode returned shape %s; the schema declares %d feature-space columns per row"
                                 % (list(features.shape), self.column_count))
            scores = scripted.score(features)
            if self.entry_layer is not None:
                self._check_entry(scripted, features, scores)

    def _check_entry(self, scripted, features, scores):
        if not hasattr(scripted, ENTRY_METHOD):
            raise TypeError("entry_layer is given but the model has no TorchScript method %r; define it (the rest of score "
                            "after the entry layer) and mark it @torch.jit.export" % ENTRY_METHOD)
        parameters = dict(scripted.named_parameters())
        weight = parameters.get(self.entry_layer + ".weight")
        if weight is None:
            raise ValueError("entry_layer %r has no weight; layers with one: %s" % (
                self.entry_layer, ", ".join(k[:-len(".weight")] for k in parameters if k.endswith(".weight"))))
        entry = torch.nn.functional.linear(features, weight, parameters.get(self.entry_layer + ".bias"))
        split = getattr(scripted, ENTRY_METHOD)(entry)
        if split.shape != scores.shape or not torch.allclose(split, scores, rtol=1e-4, atol=1e-5):
            raise ValueError("%s(linear(features)) through entry_layer %r does not reproduce score(features); "
                             "check that score applies that layer first and %s runs the rest" % (ENTRY_METHOD, self.entry_layer, ENTRY_METHOD))

    def _write_schema(self):
        column = 0
        described = []
        for f in self.features:
            described.append({"name": f["name"], "kind": f["kind"], "firstColumn": column, "columnCount": f["width"]})
            column += f["width"]
        document = {"contract": CONTRACT_VERSION, "target": self.target, "encodeMethod": "encode", "scoreMethod": "score",
                    "features": described}
        if self.entry_layer is not None:
            document["entryLayer"] = self.entry_layer
            document["scoreAfterEntryMethod"] = ENTRY_METHOD
        if self.training_cats is not None:
            cat_names = [f["name"] for f in self.features if f["kind"] == "categorical"]
            if self.training_cats.dim() != 2 or self.training_cats.shape[1] != len(cat_names):
                raise ValueError("training_cats must be [rows, %d]; got %s" % (len(cat_names), list(self.training_cats.shape)))
            counts = {}
            for j, name in enumerate(cat_names):
                ids, n = torch.unique(self.training_cats[:, j], return_counts=True)
                counts[name] = {str(int(i)): int(k) for i, k in zip(ids.tolist(), n.tolist())}
            document["trainingValueCounts"] = counts
        _write_atomically(os.path.join(self.folder, SCHEMA_FILE), json.dumps(document, indent=2) + "\n")

    def _write_probe(self):
        dense_names = [f["name"] for f in self.features if f["kind"] == "dense"]
        cat_names = [f["name"] for f in self.features if f["kind"] == "categorical"]
        lines = []
        header = dense_names + cat_names + ["label", "half"]
        for half, (d, c, y) in (("held-out", self.held_out), ("training", self.training)):
            if d.shape[1] != len(dense_names) or c.shape[1] != len(cat_names):
                raise ValueError("%s probe rows have %d dense and %d categorical columns; the features declare %d and %d"
                                 % (half, d.shape[1], c.shape[1], len(dense_names), len(cat_names)))
            for r in range(d.shape[0]):
                lines.append([repr(float(v)) for v in d[r].tolist()]
                             + [str(int(v)) for v in c[r].tolist()]
                             + [repr(float(y[r])), half])
        path = os.path.join(self.folder, PROBE_FILE)
        partial = path + ".partial"
        with open(partial, "w", encoding="utf-8", newline="") as stream:
            writer = csv.writer(stream)
            writer.writerow(header)
            writer.writerows(lines)
        os.replace(partial, path)


def _as_tensors(half, what):
    if len(half) != 3:
        raise ValueError("%s must be (dense, cats, labels); got %d items" % (what, len(half)))
    d = torch.as_tensor(half[0], dtype=torch.float32)
    c = torch.as_tensor(half[1], dtype=torch.int64)
    y = torch.as_tensor(half[2], dtype=torch.float32).reshape(-1)
    if d.dim() != 2 or c.dim() != 2 or not (d.shape[0] == c.shape[0] == y.shape[0]) or d.shape[0] == 0:
        raise ValueError("%s: dense [rows, dense], cats [rows, categoricals] and labels [rows] must have the same "
                         "number of rows, at least one; got %s, %s, %s"
                         % (what, list(d.shape), list(c.shape), list(y.shape)))
    if not all(math.isfinite(v) for v in d.reshape(-1).tolist()):
        raise ValueError("%s: dense probe values must be finite" % what)
    return d, c, y


def _number(value):
    # JSON has no NaN or Infinity: non-finite values go out as the strings DriftWatch reads back.
    value = float(value)
    if math.isfinite(value):
        return value
    return "NaN" if math.isnan(value) else ("Infinity" if value > 0 else "-Infinity")


def _write_atomically(path, text):
    partial = path + ".partial"
    with open(partial, "w", encoding="utf-8") as stream:
        stream.write(text)
    os.replace(partial, path)


def _sync(path):
    with open(path, "rb") as stream:
        os.fsync(stream.fileno())
