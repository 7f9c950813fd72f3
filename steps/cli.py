"""The `corpusmill` command: tools that work on a finished build folder.

Every command fails the same way, so scripts can tell a typo from a bad build: wrong or missing
arguments exit with status 2 and argparse's usage line; a missing, malformed or changed build
file exits with status 1 and stderr lines `corpusmill: FILE: problem; what to do`.
"""

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


def usage(args: list[str]) -> int:
    """Print the list of commands: to stdout when asked for (as each command's own --help
    does), else to stderr after naming the unknown command; the exit status."""
    asked = args[:1] in (["-h"], ["--help"])
    lines = [] if asked or not args else [f"corpusmill: unknown command {args[0]!r}; choose one of the commands below"]
    lines += ["usage: corpusmill COMMAND [options]", "", "commands:"]
    lines += [f"  {name:<10} {summary}" for name, (_, _, summary) in COMMANDS.items()]
    lines += ["", "Build with snakemake (see README); `corpusmill COMMAND --help` for options."]
    print("\n".join(lines), file=sys.stdout if asked else sys.stderr)
    return 0 if asked else 2


def main(argv: list[str] | None = None) -> None:
    args = sys.argv[1:] if argv is None else argv
    try:
        if not args or args[0] not in COMMANDS:
            status = usage(args)
        else:
            module, function, _ = COMMANDS[args[0]]
            getattr(importlib.import_module(f"{__package__}.{module}"), function)(args[1:])
            status = 0
        sys.stdout.flush()
    except BrokenPipeError:
        # The reader of our output went away (`corpusmill cutoffs --json | head`): stop quietly,
        # with the status a process killed by SIGPIPE has, and no traceback at exit's flush.
        os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
        raise SystemExit(128 + signal.SIGPIPE) from None
    if status:
        raise SystemExit(status)


if __name__ == "__main__":
    main()
