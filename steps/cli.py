"""The `corpusmill` command: tools that work on a finished build folder."""

from __future__ import annotations

import importlib
import sys

COMMANDS = {
    "audit": ("steps.verify", "check a build folder against its manifest"),
    "cutoffs": ("steps.whatif", "what a different vocabulary cutoff would give, from the stored counts"),
}


def main(argv: list[str] | None = None) -> None:
    args = sys.argv[1:] if argv is None else argv
    if not args or args[0] not in COMMANDS:
        lines = ["usage: corpusmill COMMAND [options]", "", "commands:"]
        lines += [f"  {name:<10} {summary}" for name, (_, summary) in COMMANDS.items()]
        lines += ["", "Build with snakemake (see README); `corpusmill COMMAND --help` for options."]
        print("\n".join(lines), file=sys.stderr)
        raise SystemExit(0 if args[:1] in (["-h"], ["--help"]) else 2)
    module, _ = COMMANDS[args[0]]
    importlib.import_module(module).main(args[1:])


if __name__ == "__main__":
    main()
