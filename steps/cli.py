"""The `corpusmill` command: tools that work on a finished build folder."""

from __future__ import annotations

import importlib
import os
import signal
import sys

# command → (step module, its function taking the arguments, summary)
COMMANDS = {
    "audit": ("audit", "main", "check a build folder against its manifest"),
    "baseline": ("baseline", "command", "n-gram (Kneser-Ney) perplexity of every split: the baseline to beat"),
    "compare": ("compare", "main", "what changed between two build folders: documents, splits, drops, ids, coverage, shards"),
    "cutoffs": ("cutoffs", "main", "what a different vocabulary cutoff would give, from the stored counts"),
    "hygiene": ("hygiene", "command", "near-duplicate clusters and contaminated dev/test documents, with their text"),
    "progress": ("progress", "main", "where each running job of a build is, from its log"),
    "trace": ("trace", "main", "the source text of one shard row: input file, byte offset, sentence, token"),
}


def main(argv: list[str] | None = None) -> None:
    args = sys.argv[1:] if argv is None else argv
    if not args or args[0] not in COMMANDS:
        lines = ["usage: corpusmill COMMAND [options]", "", "commands:"]
        lines += [f"  {name:<10} {summary}" for name, (_, _, summary) in COMMANDS.items()]
        lines += ["", "Build with snakemake (see README); `corpusmill COMMAND --help` for options."]
        print("\n".join(lines), file=sys.stderr)
        raise SystemExit(0 if args[:1] in (["-h"], ["--help"]) else 2)
    module, function, _ = COMMANDS[args[0]]
    try:
        getattr(importlib.import_module(f"{__package__}.{module}"), function)(args[1:])
        sys.stdout.flush()
    except BrokenPipeError:
        # The reader of our output went away (`corpusmill cutoffs --json | head`): stop quietly,
        # with the status a process killed by SIGPIPE has, and no traceback at exit's flush.
        os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
        raise SystemExit(128 + signal.SIGPIPE) from None


if __name__ == "__main__":
    main()
