"""Tidy: remove what earlier runs left in a build folder that no job of the current plan reads
or writes.

A removed input file, a changed chunk or pack size, a row kind turned off, another unit mode:
each leaves files of jobs that no longer exist (old chunk tables and counts, shard files of
chunks or kinds that are gone, their logs). They waste space, and stale shards would be taken
for part of the build. After a successful run of the whole workflow, every file under the build folder that is
neither an input, an output nor a log of a job of the run's plan is removed, except the cache
of learned subword models (a setting changed back reuses its model) and what the Snakefile adds
to the plan's files (the baseline's kept train totals while the baseline is on; with word units
the vocabulary's kept sum of chunk counts and deduplicate's kept counts of removed documents).
Only a run of the default target knows the whole plan, so a run of a single target removes
nothing.
"""

from __future__ import annotations

import os
from collections.abc import Iterable
from pathlib import Path

from .layout import Layout


def stale_files(build_root: str | Path, current: Iterable[str | Path]) -> list[Path]:
    """Files under `build_root` that are not in `current`, nor in a cache, sorted."""
    root = Path(build_root)
    # Compared as absolute paths: a current file is current however its path is spelt.
    keep = {os.path.abspath(path) for path in current}
    # Kept although no current job names them: learned subword models by sample key.
    caches = [os.path.abspath(Layout(str(root)).subword_models)]
    stale = []
    for folder, _, names in os.walk(root):
        for name in names:
            path = os.path.normpath(os.path.join(folder, name))
            absolute = os.path.abspath(path)
            if absolute not in keep and not any(absolute.startswith(cache + os.sep) for cache in caches):
                stale.append(Path(path))
    return sorted(stale)


def remove(paths: list[Path], build_root: str | Path) -> str:
    """Remove the files and the folders they leave empty below `build_root` (never the build
    folder itself, nor anything above it); a line saying what went. A file already gone (removed
    by hand or by another run meanwhile) is not counted: the line reports only what this call removed."""
    root = os.path.abspath(build_root)
    removed: list[Path] = []
    size = 0
    for path in paths:
        try:
            file_size = path.stat().st_size
            path.unlink()
        except FileNotFoundError:
            continue
        removed.append(path)
        size += file_size
        for parent in path.parents:
            if not os.path.abspath(parent).startswith(root + os.sep):
                break
            try:
                parent.rmdir()
            except OSError:
                break
    if not removed:
        return ""
    shown = ", ".join(str(p) for p in removed[:3]) + (f", +{len(removed) - 3} more" if len(removed) > 3 else "")
    return f"removed {len(removed):,} file(s) of earlier runs that no current job uses ({size / 1e6:,.1f} MB): {shown}"
