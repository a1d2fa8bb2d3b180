"""How the tests call a registry entry: its test arguments as SQL text and as the values the UDF receives."""

from tsql.forms.types import VARCHAR


def sql_value(p, text: str | None):
    """An argument's SQL text (a literal) as the Python value its UDF receives."""
    if text is None or text == "NULL":
        return None
    if text.startswith("'"):
        return text.strip("'")
    if text in ("true", "false"):
        return text == "true"
    return text if p.sql_type == VARCHAR else float(text)


def settings(fn, args: str) -> tuple[str, dict]:
    """The SQL arguments after the series and every parameter's value they give (defaults included)."""
    given = {}
    for i, part in enumerate(a.strip() for a in args.split(",") if a.strip()):
        name, _, value = part.rpartition(":=")
        given[name.strip() or fn.params[i].name] = value.strip()
    return args, {p.name: sql_value(p, given.get(p.name, p.default)) for p in fn.params}
