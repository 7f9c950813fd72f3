"""README's training-loop examples ("Reading a build in a training loop": the JAX and PyTorch
blocks) run as written on the demo build. Each block is taken from README.md under its heading,
parsed with markdown-it-py, so README and test cannot drift. What the loops trained on is compared
with the rows pyarrow reads from the shard files the manifest lists, and the losses they print
must be finite and fall from epoch to epoch. Each block runs as a script in a fresh interpreter,
as a user runs it, between a few lines of the test's own that record what it read: JAX starts
threads and PyTorch's DataLoader forks workers, and later tests of this process fork too."""

from __future__ import annotations

import importlib.util
import json
import math
import os
import re
import subprocess
import sys
from collections import Counter
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from conftest import REPO
from corpusmill import reader

markdown_it = pytest.importorskip("markdown_it")

EPOCH_LINE = re.compile(r"^epoch (\d+): mean train loss (\S+)$", re.MULTILINE)


def readme_block(heading: str) -> str:
    """The first Python code block after README's `### heading`."""
    tokens = markdown_it.MarkdownIt("commonmark").parse((REPO / "README.md").read_text(encoding="utf-8"))
    for index, token in enumerate(tokens):
        if token.type == "heading_open" and token.tag == "h3" and tokens[index + 1].content == heading:
            for later in tokens[index + 3 :]:
                if later.type == "heading_open" and later.tag <= "h3":
                    break
                if later.type == "fence" and later.info.strip() == "python":
                    return later.content
    raise AssertionError(f"README.md: no ```python block under '### {heading}'")


def run_block(heading: str, build: Path, script: Path, prologue: str = "", epilogue: str = "") -> str:
    """Run README's block under `heading`, between the test's `prologue` and `epilogue`, as `script`
    beside the build folder (the block opens "build"); its standard output."""
    script.write_text(prologue + readme_block(heading) + epilogue, encoding="utf-8")
    result = subprocess.run([sys.executable, str(script)], cwd=build.parent, capture_output=True, text=True)
    assert result.returncode == 0, f"README.md ### {heading} failed:\n{result.stderr[-4000:]}"
    return result.stdout


def printed_losses(printed: str) -> list[float]:
    """The per-epoch losses a README block printed, one line per epoch."""
    losses = [(int(epoch), float(value)) for epoch, value in EPOCH_LINE.findall(printed)]
    assert [epoch for epoch, _ in losses] == [0, 1, 2], f"expected one loss line per epoch, got:\n{printed}"
    return [value for _, value in losses]


def assert_losses_fall(losses: list[float]) -> None:
    assert all(math.isfinite(value) for value in losses), losses
    assert all(later < earlier for earlier, later in zip(losses, losses[1:])), f"loss did not fall every epoch: {losses}"


def shard_rows(build: Path, kind: str, column: str) -> np.ndarray:
    """All rows of one column of the train shards of `kind`, read with pyarrow from the files manifest.json lists."""
    manifest = json.loads((build / "manifest.json").read_text(encoding="utf-8"))
    parts = []
    for entry in manifest["splits"]["train"]["shards"]:
        if entry["kind"] == kind:
            values = pq.read_table(build / entry["file"], columns=[column]).column(column).combine_chunks()
            fixed = pa.types.is_fixed_size_list(values.type)
            parts.append(values.flatten().to_numpy().reshape(len(values), -1) if fixed else values.to_numpy()[:, None])
    return np.concatenate(parts)


def row_counts(rows: np.ndarray) -> Counter:
    return Counter(map(tuple, rows.tolist()))


def require(module: str, reason: str) -> None:
    """Skip when `module` is not installed (fail in CI for jax, which the test extra installs)."""
    if importlib.util.find_spec(module) is None:
        if os.environ.get("CI") == "true" and module == "jax":
            pytest.fail(f"jax is missing: {reason}")
        pytest.skip(f"{module} is not installed: {reason}")


# Before the JAX block: Build.batches records the ids of every batch, per call (one call per epoch).
JAX_PROLOGUE = """
import corpusmill.reader as _reader
_batches, _calls = _reader.Build.batches, []


def _recording(self, *arguments, **options):
    _calls.append([])
    for batch in _batches(self, *arguments, **options):
        _calls[-1].append(batch["ids"])
        yield batch


_reader.Build.batches = _recording
"""
# After it: the recorded rows saved for the checks, one array per call.
JAX_EPILOGUE = """
import numpy as _np
_np.savez({out!r}, *[_np.concatenate(call) for call in _calls])
"""


def test_readme_jax_example_trains_on_every_train_block_row_in_a_new_order_each_epoch_and_its_loss_falls(demo_build, tmp_path):
    """Rows compared with pyarrow's reading of the shard files; the first loss is also bounded by
    ln |V|, the cross-entropy of the uniform prediction the zero output layer starts from."""
    require("jax", "pip install -e '.[test]' installs JAX's CPU build")
    saved = tmp_path / "epochs.npz"
    printed = run_block("JAX", demo_build, tmp_path / "jax_example.py", JAX_PROLOGUE, JAX_EPILOGUE.format(out=str(saved)))

    losses = printed_losses(printed)
    assert_losses_fall(losses)
    assert losses[0] < math.log(reader.open_build(demo_build).vocabulary.size)
    expected = shard_rows(demo_build, "block", "ids")
    with np.load(saved) as arrays:
        per_epoch = [arrays[f"arr_{call}"] for call in range(len(arrays.files))]
    assert len(per_epoch) == 3
    for rows in per_epoch:
        assert len(rows) == len(expected) // 64 * 64  # drop_last: whole batches only
        assert not row_counts(rows) - row_counts(expected), "the loop trained on rows that are not train block rows"
    assert not np.array_equal(per_epoch[0], per_epoch[1]), "epochs 0 and 1 fed the same order"


# Appended to the PyTorch block: one more pass over epoch 0 through the block's own loader, saved for the checks.
PYTORCH_EPILOGUE = """
import numpy as _np
dataset.set_epoch(0)
_pairs = [(context.numpy(), target.numpy()) for context, target in loader]
_np.savez(
    {out!r}, context=_np.concatenate([c for c, _ in _pairs]), target=_np.concatenate([t for _, t in _pairs]),
    workers=loader.num_workers, rows=[build.rows("train", "ngram", w, loader.num_workers) for w in range(loader.num_workers)],
)
"""


def test_readme_pytorch_example_workers_read_disjoint_slices_of_train_and_its_loss_falls(demo_build, tmp_path):
    """Rows compared with pyarrow's reading of the shard files. Not run in CI: see README ("### PyTorch")."""
    require("torch", "README's PyTorch section says how to install its CPU build")
    saved = tmp_path / "epoch0.npz"
    printed = run_block("PyTorch", demo_build, tmp_path / "pytorch_example.py", epilogue=PYTORCH_EPILOGUE.format(out=str(saved)))

    assert_losses_fall(printed_losses(printed))
    with np.load(saved) as arrays:
        context, target, workers, rows = arrays["context"], arrays["target"], int(arrays["workers"]), arrays["rows"]
    assert context.dtype == target.dtype == np.int64
    # Each DataLoader worker is one data-parallel rank of `workers` and drops its last partial batch.
    assert workers == len(rows) == 2
    assert len(target) == sum(worker_rows // 512 * 512 for worker_rows in rows)
    expected = np.column_stack([shard_rows(demo_build, "ngram", "context"), shard_rows(demo_build, "ngram", "target")])
    assert not row_counts(np.column_stack([context, target])) - row_counts(expected), "rows read twice or not train ngram rows"
