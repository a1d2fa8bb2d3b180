"""Reference text generated from the registry: ``seriesql functions``, the README's function table and the
per-function tables of docs/behaviour.md.

``python -m tsql.reference README.md docs/behaviour.md`` rewrites the generated tables in place.
"""

from __future__ import annotations

import difflib
import sys
from pathlib import Path

from tsql.registry import BY_NAME, FUNCTIONS, INPUT_CLASSES, PUBLIC, Function, TableMacro


def describe(fn: Function | TableMacro) -> str:
    """What ``seriesql functions NAME`` prints: signatures, doc, NULL rows, arguments, example."""
    lines = [fn.signature, f"  {fn.doc}", f"  returns {fn.public_returns or fn.returns}; NULL for: {fn.null_rows}"]
    for p in fn.params + fn.time_params:
        if p.help:
            lines.append(f"  {p.name}: {p.help}")
    if fn.aggregate:
        lines.append(f"  aggregate form: {fn.agg_signature}")
    if fn.see_also:
        lines.append(f"  see also: {', '.join(fn.see_also)}")
    lines.append(f"  example: {fn.example}")
    return "\n".join(lines)


def find_function(name: str) -> Function | None:
    """The function called ``name`` (its ``*_agg`` form's name too; any case), or None."""
    return BY_NAME.get(name.strip().lower().removesuffix("_agg"))


def similar_names(name: str, count: int = 3) -> list[str]:
    """Up to ``count`` public names (``*_agg`` forms included) close to a mistyped ``name``, closest first."""
    names = [f.name for f in PUBLIC] + [f"{f.name}_agg" for f in FUNCTIONS if f.aggregate]
    return difflib.get_close_matches(name.strip().lower(), names, n=count, cutoff=0.6)


def unknown_function(name: str, listing: str) -> str:
    """The message for a name that is no function: the close names, if any, and where the list is."""
    close = similar_names(name)
    guess = f"did you mean {close[0]}? " if len(close) == 1 else ""
    if len(close) > 1:
        guess = f"did you mean {', '.join(close[:-1])} or {close[-1]}? "
    return f"no function named {name!r}; {guess}{listing} lists them"


def function_list() -> str:
    """One line per function: its name and one-line doc."""
    width = max(len(f.name) for f in PUBLIC)
    return "\n".join(f"{fn.name:<{width}}  {fn.doc}" for fn in PUBLIC)


def markdown_table() -> str:
    """The README's function table."""
    rows = ["| family | function | returns | what it answers |", "|---|---|---|---|"]
    for fn in PUBLIC:
        agg = f" · `{fn.name}_agg({', '.join(fn.agg_values)}, time, …)`" if fn.aggregate else ""
        returns = f"`{fn.public_returns or fn.returns}`"
        if fn.aggregate and fn.agg_returns != fn.returns:
            returns += f" · agg: `{fn.agg_returns}`"
        rows.append(f"| {fn.family} | `{fn.signature}`{agg} | {returns} | {fn.doc} |")
    return "\n".join(rows)


def inputs_table() -> str:
    """docs/behaviour.md's matrix: every public form of a row's series against every input class (the aggregates
    over rows, ``over_rows``, answer for a set of items and have their own section)."""
    rows = ["| function | " + " | ".join(INPUT_CLASSES) + " |", "|---" * (len(INPUT_CLASSES) + 1) + "|"]
    forms = [(fn.name, fn.outcomes.split()) for fn in FUNCTIONS]
    forms += [(f"{fn.name}_agg", fn.agg_outcomes) for fn in FUNCTIONS if fn.aggregate]
    rows += [f"| {name} | " + " | ".join(outcomes) + " |" for name, outcomes in forms]
    return "\n".join(rows)


def null_arguments_table() -> str:
    """docs/behaviour.md's table of what a NULL argument gives: a NULL row, or the default."""
    rows = ["| function | argument | NULL gives |", "|---|---|---|"]
    forms = [(fn.name, fn.params) for fn in FUNCTIONS]
    forms += [(f"{fn.name}_agg", fn.agg_params) for fn in FUNCTIONS if fn.aggregate]
    for name, params in forms:
        rows += [f"| {name} | {p.name} | {'default' if p.none_ok else 'null'} |" for p in params]
    return "\n".join(rows)


GENERATED = {
    "| family | function | returns | what it answers |": markdown_table,
    "<!-- table: inputs -->": inputs_table,
    "<!-- table: null-arguments -->": null_arguments_table,
}
"""Where each generated table goes: the line it starts with (a table's header) or follows (a marker)."""


def regenerate(text: str) -> str:
    """``text`` with every generated table it holds rewritten."""
    for anchor, make in GENERATED.items():
        if anchor not in text:
            continue
        before, _, after = text.partition(anchor)
        lines = after.split("\n")
        end = 1  # the table's rows start on the next line
        while end < len(lines) and lines[end].startswith("|"):
            end += 1
        table = make().removeprefix(anchor + "\n")  # a table found by its header keeps it
        text = before + anchor + "\n".join(lines[:1] + [table] + lines[end:])
    return text


def main(paths: list[str]) -> int:
    for name in paths:
        path = Path(name)
        text = path.read_text(encoding="utf-8")
        new = regenerate(text)
        if new != text:
            path.write_text(new, encoding="utf-8")
            print(f"rewrote {path}")
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
