"""Write docs/cli.md from the command line's own parser (ladder/cli.py), so the reference cannot drift.

    python docs/make_cli_reference.py          # rewrite docs/cli.md
    python docs/make_cli_reference.py --check  # exit 1 when docs/cli.md differs from the parser

tests/test_docs.py runs the check. The text is built from the argparse actions (names, metavars, defaults,
help), not from argparse's own help formatting, so it does not depend on the terminal width or the Python
version.
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
TARGET = ROOT / "docs" / "cli.md"


def _cell(text: str) -> str:
    return str(text).replace("|", "\\|").replace("\n", " ")


def _usage(prog: str, parser: argparse.ArgumentParser) -> str:
    parts = [prog]
    for a in parser._actions:
        if isinstance(a, argparse._HelpAction):
            continue
        if not a.option_strings:
            parts.append(a.metavar or a.dest)
            continue
        flag = a.option_strings[-1] if a.option_strings[-1].startswith("--") else a.option_strings[0]
        takes = a.nargs != 0
        s = f"{flag} {a.metavar or a.dest.upper()}" if takes else flag
        parts.append(s if a.required else f"[{s}]")
    return " ".join(parts)


def _arguments(parser: argparse.ArgumentParser) -> list[str]:
    rows = ["| argument | meaning | default |", "| --- | --- | --- |"]
    for a in parser._actions:
        if isinstance(a, (argparse._HelpAction, argparse._SubParsersAction)):
            continue
        if a.option_strings:
            name = ", ".join(a.option_strings) + (f" {a.metavar or a.dest.upper()}" if a.nargs != 0 else "")
        else:
            name = a.metavar or a.dest
        if a.required and a.option_strings:
            default = "required"
        elif a.nargs == 0 or a.default in (None, argparse.SUPPRESS) or not a.option_strings:
            default = ""
        else:
            default = f"`{a.default}`"
        rows.append(f"| `{_cell(name)}` | {_cell(a.help or '')} | {default} |")
    return rows


def cli_reference() -> str:
    """docs/cli.md as text, from :func:`ladder.cli._parser`."""
    sys.path.insert(0, str(ROOT))
    from ladder import cli

    parser = cli._parser()
    sub = next(a for a in parser._actions if isinstance(a, argparse._SubParsersAction))
    helps = {c.dest: c.help for c in sub._choices_actions}
    lines = ["# Command-line reference", "",
             "<!-- generated from ladder/cli.py by `python docs/make_cli_reference.py`; do not edit by hand -->", "",
             f"{parser.description}", "", "```text", f"ladder [--version] COMMAND ...", "```", "",
             f"Exit codes: {cli.EXIT_OK} ok; {cli.EXIT_BAD_INPUT} bad input (one message naming the file, the column "
             "or key and the rows; nothing written); "
             f"{cli.EXIT_DIAGNOSTICS} failed diagnostics under `--strict`.", "",
             "| command | what it does |", "| --- | --- |"]
    lines += [f"| [`{name}`](#ladder-{name}) | {_cell(helps.get(name, ''))} |" for name in sub.choices]
    for name, p in sub.choices.items():
        lines += ["", f"## ladder {name}", "", f"{helps.get(name, '')}", "", "```text",
                  _usage(f"ladder {name}", p), "```", ""]
        lines += _arguments(p)
    return "\n".join(lines) + "\n"


def main(argv=None) -> int:
    args = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    args.add_argument("--check", action="store_true", help="exit 1 when docs/cli.md is out of date")
    ns = args.parse_args(argv)
    text = cli_reference()
    if ns.check:
        ok = TARGET.is_file() and TARGET.read_text(encoding="utf-8") == text
        print("docs/cli.md is up to date" if ok else "docs/cli.md is out of date: run python docs/make_cli_reference.py")
        return 0 if ok else 1
    TARGET.write_text(text, encoding="utf-8")
    print(TARGET)
    return 0


if __name__ == "__main__":
    sys.exit(main())
