"""The reference page of the Python API, made from the docstrings of :class:`archive.Archive` (a test keeps the
committed page, ``site/reference/python-api.md``, current)."""

from __future__ import annotations

import inspect
import re


def api_reference() -> str:
    """The Markdown reference of :class:`archive.Archive`: each public method with its signature and docstring."""
    from archive.api import Archive

    lines = [
        "# Python API",
        "",
        "Generated from the docstrings by `archive.apiref.api_reference()`; do not edit by hand.",
        "",
        "```python",
        "from archive import Archive",
        "",
        'shop = Archive.open(".")   # the archive holding this folder',
        "```",
        "",
        inspect.cleandoc(Archive.__doc__ or ""),
        "",
    ]
    for name, member in sorted(vars(Archive).items()):
        if name.startswith("_"):
            continue
        function = member.__func__ if isinstance(member, classmethod | staticmethod) else member
        if isinstance(member, property):
            function = member.fget
        if not callable(function):
            continue
        signature = "" if isinstance(member, property) else str(inspect.signature(function))
        signature = re.sub(r"(: |-> )'([^']*)'", r"\1\2", signature)  # annotations are strings here
        signature = re.sub(r'(: |-> )"([^"]*)"', r"\1\2", signature)
        signature = signature.replace("(self, ", "(").replace("(self)", "()").replace("(cls, ", "(")
        lines += [f"## `{name}{signature}`", "", inspect.cleandoc(function.__doc__ or "(no description)"), ""]
    return "\n".join(lines).rstrip() + "\n"


if __name__ == "__main__":  # python -m archive.apiref > site/reference/python-api.md
    print(api_reference(), end="")
