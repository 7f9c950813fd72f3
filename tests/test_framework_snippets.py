"""README's training-loop examples ("Reading a build in a training loop": the JAX and PyTorch
blocks) run as written on the demo build. Each block is taken from README.md under its heading,
parsed with markdown-it-py, so README and test cannot drift. What the loops trained on is compared
with the rows pyarrow reads from the shard files the manifest lists, and the losses they print
must be finite and fall from epoch to epoch."""

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


def test_readme_jax_example_trains_on_every_train_block_row_in_a_new_order_each_epoch_and_its_loss_falls(demo_build, monkeypatch, capsys):
    """Rows compared with pyarrow's reading of the shard files; the first loss is also bounded by
    ln |V|, the cross-entropy of the uniform prediction the zero output layer starts from."""
    require("jax", "pip install -e '.[test]' installs JAX's CPU build")
    calls: list[list[np.ndarray]] = []  # the ids of each batch, per call of Build.batches (one call per epoch)
    batches = reader.Build.batches

    def recording(self, *arguments, **options):
        calls.append([])
        for batch in batches(self, *arguments, **options):
            calls[-1].append(batch["ids"])
            yield batch

    monkeypatch.setattr(reader.Build, "batches", recording)
    monkeypatch.chdir(demo_build.parent)  # the block opens "build"
    exec(compile(readme_block("JAX"), "README.md ### JAX", "exec"), {"__name__": "__main__"})
    losses = printed_losses(capsys.readouterr().out)

    assert_losses_fall(losses)
    vocabulary_size = reader.open_build(demo_build).vocabulary.size
    assert losses[0] < math.log(vocabulary_size)
    expected = shard_rows(demo_build, "block", "ids")
    assert len(calls) == 3
    per_epoch = [np.concatenate(call) for call in calls]
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
    """Rows compared with pyarrow's reading of the shard files. The block runs in a fresh
    interpreter, as a user runs it: its DataLoader forks workers, and forking this process after
    other tests started threads (JAX's) risks a deadlock. Not run in CI: see README ("### PyTorch")."""
    require("torch", "README's PyTorch section says how to install its CPU build")
    script = tmp_path / "pytorch_example.py"
    script.write_text(readme_block("PyTorch") + PYTORCH_EPILOGUE.format(out=str(tmp_path / "epoch0.npz")), encoding="utf-8")
    result = subprocess.run([sys.executable, str(script)], cwd=demo_build.parent, capture_output=True, text=True)
    assert result.returncode == 0, result.stderr[-4000:]

    assert_losses_fall(printed_losses(result.stdout))
    saved = np.load(tmp_path / "epoch0.npz")
    context, target = saved["context"], saved["target"]
    assert context.dtype == target.dtype == np.int64
    # Each DataLoader worker is one data-parallel rank of `workers` and drops its last partial batch.
    assert len(target) == sum(rows // 512 * 512 for rows in saved["rows"])
    assert int(saved["workers"]) == len(saved["rows"]) == 2
    expected = np.column_stack([shard_rows(demo_build, "ngram", "context"), shard_rows(demo_build, "ngram", "target")])
    assert not row_counts(np.column_stack([context, target])) - row_counts(expected), "rows read twice or not train ngram rows"
