"""How every step is started: the build folder, the chunk for per-chunk steps, and the
configuration sections its rule reads.

Every rule runs `python -m steps.run MODULE [ENTRY] --build DIR [--chunk KEY]`; the step finds
every path it reads or writes through `Layout(DIR)` and its options in the rule's options file
(written by steps.plan when the workflow is read, holding only the sections the step module
declares in SECTIONS). So a step runs the same by hand, on a cluster node or in a test.
"""

from __future__ import annotations

import argparse
import json
import sys
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from .layout import Layout


@dataclass(frozen=True)
class Job:
    layout: Layout
    rule: str
    chunk: str
    options: dict[str, Any]

    def chunks(self) -> list[str]:
        """The build's chunk keys in corpus order."""
        return list(json.loads(Path(self.layout.chunk_list).read_text(encoding="utf-8")))


def start(argv: list[str] | None, rule: str, description: str, per_chunk: bool = False) -> Job:
    """Parse a step's command line and read its options."""
    parser = argparse.ArgumentParser(prog=f"python -m steps.run {rule}", description=description)
    parser.add_argument("--build", required=True, help="the build folder")
    if per_chunk:
        parser.add_argument("--chunk", required=True, help="the chunk's key (interim/plan/chunks.json lists them)")
    args = parser.parse_args(argv)
    layout = Layout(args.build)
    options = json.loads(Path(layout.options(rule)).read_text(encoding="utf-8"))
    return Job(layout, rule, getattr(args, "chunk", ""), options)


def entries(**functions: Callable[[list[str]], None]) -> Callable[..., None]:
    """The main of a module with several entries (`python -m steps.run MODULE ENTRY --build …`)."""

    def main(argv: list[str] | None = None) -> None:
        args = sys.argv[1:] if argv is None else argv
        if not args or args[0] not in functions:
            raise SystemExit(f"usage: python -m steps.run MODULE {{{','.join(functions)}}} --build DIR [--chunk KEY]")
        functions[args[0]](args[1:])

    return main
