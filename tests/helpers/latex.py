"""Structure checks of LaTeX text (no TeX system needed): comments, braces, environments."""

from __future__ import annotations

import re

__all__ = ["KNOWN_COMMANDS", "code", "unbalanced", "unknown_commands"]

#: Control words the outputs may use: LaTeX's own (article class, LaTeX 2e kernel and its math
#: symbols; its box and conditional primitives), booktabs' rules, graphicx's \includegraphics and
#: \resizebox, and fringe's own macros.
KNOWN_COMMANDS = set("""
begin end centering caption label paragraph item providecommand newcommand ensuremath input
toprule midrule bottomrule includegraphics textwidth columnwidth
tilde kappa pm times sigma chi theta phi omega alpha beta delta nu lambda Delta le ge approx
frac circ mu ldots oplus tau rho pi gamma epsilon eta psi Omega surd propto to infty ne cdot
mathrm textasciitilde textasciicircum textbackslash
ifdefined else fi newsavebox sbox usebox ifdim wd resizebox
""".split())


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


def unknown_commands(tex: str) -> set[str]:
    r"""Control words of ``tex`` outside :data:`KNOWN_COMMANDS` and ``\fringe...`` macros.

    Comments are left out.
    """
    used = set(re.findall(r"\\([A-Za-z]+)", code(tex)))
    return {u for u in used - KNOWN_COMMANDS if not u.startswith("fringe")}
