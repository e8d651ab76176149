"""Structure checks of LaTeX text (no TeX system needed): comments, braces, environments."""

from __future__ import annotations

import re

__all__ = ["code", "unbalanced"]


def code(tex: str) -> str:
    """The text without comments (``%`` to the end of the line, unless escaped)."""
    return "\n".join(re.sub(r"(?<!\\)%.*", "", line) for line in tex.splitlines())


def unbalanced(tex: str) -> list[str]:
    """Problems with the braces and environments of ``tex`` (comments left out)."""
    text = re.sub(r"\\[{}%&$#_\\]", "", code(tex))        # escaped characters, \\ rows
    problems, depth = [], 0
    for i, ch in enumerate(text):
        depth += {"{": 1, "}": -1}.get(ch, 0)
        if depth < 0:
            problems.append(f"closing brace without an opening one at {i}")
            depth = 0
    if depth:
        problems.append(f"{depth} brace(s) left open")
    stack = []
    for kind, env in re.findall(r"\\(begin|end)\{([^}]*)\}", text):
        if kind == "begin":
            stack.append(env)
        elif not stack or stack.pop() != env:
            problems.append(rf"\end{{{env}}} does not close the open environment")
    problems += [rf"\begin{{{e}}} never closed" for e in stack]
    if text.count("$") % 2:
        problems.append("an odd number of $")
    return problems
