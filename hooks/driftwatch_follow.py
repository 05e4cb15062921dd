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
            verdict = folder.end_epoch(model, epoch, train_loss=train_loss, validation_loss=validation_loss,
                                       verdict_timeout=120)
            if verdict.halt:
                print("stopping at epoch", epoch, verdict.kinds, verdict.reasons)
                break

Beside it, in another shell, started before or after the loop: ``driftwatch follow runs/night-7 --store runs/store.litedb``.
``follow`` writes ``verdict-0001.json``, ... into the folder as it judges each epoch; ``end_epoch`` with ``verdict_timeout``
waits up to that many seconds for the verdict of the epoch it just wrote and returns it, so the loop hears it in the same
epoch. A wait that runs out raises nothing: it prints one line to stderr and returns a ``Verdict`` whose ``arrived`` is
False (``halt`` False), and the epoch is judged whenever ``follow`` runs. Without ``verdict_timeout`` nothing waits:
``end_epoch`` returns the not-arrived ``Verdict`` and ``folder.latest_verdict()`` at the next epoch gives the newest
verdict there (one epoch behind or more). Pass ``raise_on_timeout=True`` to the writer to get ``VerdictTimeout`` instead.

A model with dense inputs only, or categorical ids only, passes ``None`` for the missing part:
``held_out=(x, None, y)`` or ``held_out=(None, ids, y)``; ``encode`` then receives an empty ``[rows, 0]`` tensor there.

Optional, when ``score`` applies a ``torch.nn.Linear`` to the features first (``body.0`` above): export the rest of
``score`` as ``score_after_entry(entry)`` and pass ``entry_layer="body.0"``. DriftWatch then walks Integrated
Gradients' path in that layer's output, which gives the same attributions for less work::

        @torch.jit.export
        def score_after_entry(self, entry: torch.Tensor) -> torch.Tensor:
            return self.body[2](self.body[1](entry))

Files written (the run-folder contract, docs/pytorch.md):

* ``schema.json``: the features in feature-space order, each with its kind and the columns it owns;
* ``probe.csv``: the probe rows (dense columns, categorical ids, label, half), written once;
* ``epoch-0001.pt``, ...: the TorchScript snapshot of each epoch, written under a temporary name and renamed,
  so a reader never sees half a file;
* ``metrics.jsonl``: one JSON object per epoch, appended after that epoch's snapshot is in place;
* ``finished``: written by ``close()``; tells ``follow`` that no more epochs will come.

``follow`` writes one file back: ``verdict-0001.json``, ... (epoch, verdict, kinds, reasons, findings), under a temporary
name and renamed, so this helper never reads half a file. A Halt is advice to a person, not proof.
"""

import csv
import json
import math
import os
import sys
import time

import torch

SCHEMA_FILE = "schema.json"
ENTRY_METHOD = "score_after_entry"
PROBE_FILE = "probe.csv"
METRICS_FILE = "metrics.jsonl"
FINISHED_FILE = "finished"
# The run-folder contract (schema.json "contract"): 2 adds the verdict files follow writes back. A driftwatch that reads
# only older contracts refuses the folder with one line (exit 2).
CONTRACT_VERSION = 2
HELPER_VERSION = "2.0"
VERDICTS = ("Continue", "Caution", "Halt")


class VerdictTimeout(TimeoutError):
    """Raised by ``end_epoch`` when its wait for the verdict runs out and the writer was made with ``raise_on_timeout=True``."""


class Verdict:
    """The verdict ``driftwatch follow`` wrote for one epoch, or the fact that none is there (``arrived`` False).

    ``halt``: whether Halt is advised (advice to a person, not proof); ``verdict``: ``Continue``, ``Caution`` or ``Halt``
    (None when not arrived); ``kinds``: the finding kinds behind that verdict (``kind``: the first, or None);
    ``reasons``: one line each; ``findings``: dicts with kind, severity, feature, evidence; ``message``: why nothing arrived.
    """

    def __init__(self, epoch, verdict=None, kinds=(), reasons=(), findings=(), message=""):
        self.epoch = int(epoch)
        self.verdict = verdict
        self.arrived = verdict is not None
        self.halt = verdict == "Halt"
        self.caution = verdict == "Caution"
        self.kinds = tuple(kinds)
        self.kind = self.kinds[0] if self.kinds else None
        self.reasons = tuple(reasons)
        self.findings = tuple(findings)
        self.message = str(message)

    def __bool__(self):
        return self.arrived

    def __repr__(self):
        if not self.arrived:
            return "Verdict(epoch=%d, arrived=False, message=%r)" % (self.epoch, self.message)
        return "Verdict(epoch=%d, verdict=%r, kinds=%r, reasons=%r)" % (self.epoch, self.verdict, self.kinds, self.reasons)


def snapshot_name(epoch):
    """The file name of an epoch's TorchScript snapshot, e.g. ``epoch-0007.pt``."""
    return "epoch-%04d.pt" % epoch


def verdict_name(epoch):
    """The file name of the verdict ``follow`` writes for an epoch, e.g. ``verdict-0007.json``."""
    return "verdict-%04d.json" % epoch


def read_verdict(folder, epoch):
    """The verdict ``follow`` wrote for ``epoch`` in ``folder``, or a ``Verdict`` with ``arrived`` False when none is there."""
    path = os.path.join(str(folder), verdict_name(epoch))
    try:
        with open(path, encoding="utf-8") as stream:
            document = json.load(stream)
    except FileNotFoundError:
        return Verdict(epoch, message="no verdict for epoch %d yet (%s is not there)" % (epoch, verdict_name(epoch)))
    except (OSError, ValueError) as problem:
        return Verdict(epoch, message="verdict file %s could not be read (%s)" % (path, problem))
    kind = document.get("verdict") if isinstance(document, dict) else None
    if kind not in VERDICTS or document.get("epoch") != epoch:
        return Verdict(epoch, message="verdict file %s is not a verdict of epoch %d; let driftwatch follow write it" % (path, epoch))
    return Verdict(epoch, kind, document.get("kinds", ()), document.get("reasons", ()), document.get("findings", ()))


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

    def __init__(self, folder, features, held_out, training, target="logit", training_cats=None, entry_layer=None,
                 raise_on_timeout=False):
        """Prepares ``folder`` (created if missing).

        ``features``: ``dense(...)`` and ``categorical(...)`` entries in the order ``encode`` lays out their columns.
        ``held_out`` and ``training``: ``(dense [rows, dense], cats [rows, categoricals], labels [rows])`` tensors for
        the two halves of the probe set (rows the model does not train on, and rows it trains on). A model without dense
        inputs passes ``None`` for dense, one without categoricals ``None`` for cats: ``encode`` then gets ``[rows, 0]``.
        ``target``: the attributed output: ``logit``, ``probability``, ``regression`` or ``class N``.
        ``training_cats``: optional, the categorical ids of every training row ``[rows, categoricals]``; the counts of
        each id let DriftWatch recognise identifier-like features (most ids in one to three rows).
        ``entry_layer``: optional, the module path (as ``named_modules()`` names it) of the ``torch.nn.Linear`` that
        ``score`` applies to the features first; the model must then export ``score_after_entry``, the rest of
        ``score``. Checked on the held-out rows at the first epoch.
        ``raise_on_timeout``: when True, an ``end_epoch`` whose wait for the verdict runs out raises ``VerdictTimeout``;
        by default it prints one line to stderr and returns a ``Verdict`` with ``arrived`` False.
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
        self.raise_on_timeout = bool(raise_on_timeout)
        self._first = True
        self._last_epoch = None
        os.makedirs(self.folder, exist_ok=True)

    @property
    def column_count(self):
        """The feature-space width the schema declares."""
        return sum(f["width"] for f in self.features)

    def end_epoch(self, model, epoch, train_loss, validation_loss, verdict_timeout=None, **others):
        """Writes the epoch's TorchScript snapshot, then its metrics line, and returns the epoch's ``Verdict``.

        Call once per epoch, epochs increasing. ``verdict_timeout``: seconds to wait for the verdict ``driftwatch follow``
        writes for this epoch (it arrives in this same call when follow keeps up); None (the default) does not wait and
        returns a ``Verdict`` with ``arrived`` False. Other keyword arguments are stored as metrics.
        """
        epoch = int(epoch)
        if verdict_timeout is not None and not (float(verdict_timeout) >= 0):
            raise ValueError("verdict_timeout must be a number of seconds of at least 0, or None not to wait; got %r" % (verdict_timeout,))
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
        if verdict_timeout is None:
            return Verdict(epoch, message="not waited for (end_epoch without verdict_timeout); see latest_verdict()")
        return self.wait_for_verdict(epoch, verdict_timeout)

    def wait_for_verdict(self, epoch, timeout):
        """Waits up to ``timeout`` seconds for the verdict of ``epoch``; returns it, or a not-arrived ``Verdict``."""
        deadline = time.monotonic() + float(timeout)
        while True:
            verdict = read_verdict(self.folder, epoch)
            if verdict.arrived or time.monotonic() >= deadline:
                break
            time.sleep(min(0.1, max(0.0, deadline - time.monotonic())))
        if verdict.arrived:
            return verdict
        line = ("no verdict for epoch %d within %g s in %s; is 'driftwatch follow %s' running? The epoch is saved and will be "
                "judged when follow reads it; training goes on" % (epoch, float(timeout), self.folder, self.folder))
        if self.raise_on_timeout:
            raise VerdictTimeout(line)
        sys.stderr.write("driftwatch_follow: " + line + "\n")
        sys.stderr.flush()
        return Verdict(epoch, message=line)

    def latest_verdict(self):
        """The newest verdict ``follow`` has written into the folder, or a not-arrived ``Verdict`` (epoch 0) when none is."""
        epochs = []
        for name in os.listdir(self.folder):
            if name.startswith("verdict-") and name.endswith(".json") and name[8:-5].isdigit():
                epochs.append(int(name[8:-5]))
        for epoch in sorted(epochs, reverse=True):
            verdict = read_verdict(self.folder, epoch)
            if verdict.arrived:
                return verdict
        return Verdict(0, message="no verdict in %s yet; is 'driftwatch follow' running on it?" % self.folder)

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
        document = {"contract": CONTRACT_VERSION, "helper": HELPER_VERSION, "target": self.target, "encodeMethod": "encode", "scoreMethod": "score",
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
    if half[2] is None:
        raise ValueError("%s: labels are missing; give (dense, cats, labels) with labels [rows]" % what)
    if half[0] is None and half[1] is None:
        raise ValueError("%s: dense and cats are both None; give at least one of them" % what)
    y = torch.as_tensor(half[2], dtype=torch.float32).reshape(-1)
    # A model without dense inputs (or without categoricals) gets an empty [rows, 0] tensor in their place.
    d = torch.zeros(y.shape[0], 0) if half[0] is None else torch.as_tensor(half[0], dtype=torch.float32)
    c = torch.zeros(y.shape[0], 0, dtype=torch.int64) if half[1] is None else torch.as_tensor(half[1], dtype=torch.int64)
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
