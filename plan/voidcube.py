"""The ``voidcube`` command: one command on the PATH, three groups.

``voidcube plan ...`` (the quarry engineer: survey design before fieldwork),
``voidcube reconstruct ...`` (the processor and the safety officer: pick
checks, inversion, voids, report) and ``voidcube demo FOLDER --out OUT`` (the
whole job on a demo site). Each group is its own parser
(:func:`plan.cli.main`, :func:`reconstruct.cli.main`, :func:`plan.demo.main`);
this module only picks the group. ``python3 -m plan`` and
``python3 -m reconstruct`` run their groups alone.
"""

from __future__ import annotations

import sys

from reconstruct import __version__

__all__ = ["GROUPS", "main"]

#: The groups and what they are for.
GROUPS = {
    "plan": "design a survey before fieldwork: layout, pairs, radio mesh, schedule, coverage, recovery",
    "reconstruct": "process the picks: check-inputs, check-picks, invert, voids, report",
    "demo": "the whole job on a demo site, from plan to void report",
}

_USAGE = "usage: voidcube {plan,reconstruct,demo} ... [-h] [--version]"


def _help() -> str:
    lines = [_USAGE, "", "Radar tomography for voids in quarries and mines, from survey plan to void report.",
             "", "groups:"]
    lines += [f"  {name:<12} {text}" for name, text in GROUPS.items()]
    lines += ["", "'voidcube GROUP --help' lists the commands of a group.",
              "Units: metres (m), nanoseconds (ns), velocities in m/ns."]
    return "\n".join(lines)


def main(argv=None) -> int:
    """Run ``voidcube GROUP ...``; returns the exit code (2 for an unknown group)."""
    argv = list(sys.argv[1:] if argv is None else argv)
    if not argv or argv[0] in ("-h", "--help"):
        print(_help())
        return 0 if argv else 2
    if argv[0] == "--version":
        print(f"voidcube {__version__}")
        return 0
    if argv[0] not in GROUPS:
        print(f"{_USAGE}\nerror: unknown group {argv[0]!r}; use one of {', '.join(GROUPS)}", file=sys.stderr)
        return 2
    if argv[0] == "plan":
        from plan.cli import main as run
    elif argv[0] == "reconstruct":
        from reconstruct.cli import main as run
    else:
        from plan.demo import main as run
    return run(argv[1:])


if __name__ == "__main__":
    sys.exit(main())
