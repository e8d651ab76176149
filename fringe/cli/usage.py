"""Mistakes on the command line itself (an unknown option, a value out of range) in one line.

click prints its usage errors as three lines (usage, a hint, the error). :class:`FringeGroup`
turns them into one line that names the option, what was expected and where to look, e.g.
``error: --max-harmonic: 9 is not in 2..4 (see fringe fit --help)``, exit status 2. An unknown
option or command names the nearest known one (:func:`fringe.errors.nearest_name`).
"""

from __future__ import annotations

import re

import click

from fringe.errors import nearest_name

#: click's wordings of a bad value, rewritten shorter (pattern, replacement).
_REWORDINGS = (
    (re.compile(r"is not in the range (\S+?)<=x<=(\S+?)\.?$"), r"is not in \1..\2"),
    (re.compile(r"is not in the range x>=(\S+?)\.?$"), r"is less than \1 (expected at least \1)"),
    (re.compile(r"is not in the range x<=(\S+?)\.?$"), r"is more than \1 (expected at most \1)"),
    (re.compile(r"is not a valid (integer|float)( range)?\.?$"),
     lambda m: "is not " + ("an integer" if m.group(1) == "integer" else "a number")),
)


def command_path(ctx: click.Context | None) -> str:
    """The command as a user types it, e.g. ``"fringe fit"`` (whatever the program name)."""
    names = []
    while ctx is not None:
        names.append(ctx.info_name or "")
        ctx = ctx.parent
    names[-1] = "fringe"
    return " ".join(reversed([n for n in names if n]))


def _param_name(param: click.Parameter | None) -> str:
    if param is None:
        return "value"
    if isinstance(param, click.Option):
        return max(param.opts, key=len)
    return param.human_readable_name


def _reword(text: str) -> str:
    text = " ".join(str(text).split()).rstrip(".")
    for pattern, replacement in _REWORDINGS:
        text = pattern.sub(replacement, text)
    return text


def _choice_hint(exc: click.BadParameter) -> str:
    """"; did you mean X?" for a value that is nearly one of a Choice's names."""
    param = exc.param
    if param is None or not isinstance(param.type, click.Choice):
        return ""
    got = re.match(r"'(.*?)' is not one of", exc.message)
    near = nearest_name(got.group(1), param.type.choices) if got else None
    return f"; did you mean {near}?" if near else ""


def usage_line(exc: click.UsageError) -> str:
    """One line for a click usage error: what was wrong, the expectation, where to look."""
    path = command_path(exc.ctx)
    see = f"(see {path} --help)"
    if isinstance(exc, click.NoSuchOption):
        known = exc.possibilities or []
        if exc.ctx is not None:
            known = [o for p in exc.ctx.command.params for o in getattr(p, "opts", ())
                     if o.startswith("-")] + ["--help"]
        near = nearest_name(exc.option_name, known)
        hint = f"; did you mean {near}?" if near else ""
        return f"{exc.option_name}: no such option of {path}{hint} {see}"
    if isinstance(exc, click.MissingParameter):
        name = _param_name(exc.param)
        return f"{name}: missing; {path} needs it {see}"
    if isinstance(exc, click.BadParameter):
        return f"{_param_name(exc.param)}: {_reword(exc.message)}{_choice_hint(exc)} {see}"
    text = _reword(exc.message)
    return f"{path}: {text[:1].lower() + text[1:]} {see}"


class OneLineUsageError(click.ClickException):
    """A usage error already put in one line (printed as ``error: ...``, exit status 2)."""

    exit_code = 2

    def show(self, file=None) -> None:
        """Print the one line on stderr."""
        click.echo(f"error: {self.message}", err=True)


class FringeGroup(click.Group):
    """The ``fringe`` group: usage errors of the group and of every command in one line."""

    def make_context(self, info_name, args, parent=None, **extra):
        """Parse the group's own options; a usage error becomes one line."""
        try:
            return super().make_context(info_name, args, parent=parent, **extra)
        except click.exceptions.NoArgsIsHelpError:
            raise                          # "fringe" alone: the help, as click prints it
        except click.UsageError as exc:
            raise OneLineUsageError(usage_line(exc)) from None

    def resolve_command(self, ctx, args):
        """Find the command; an unknown one names the nearest."""
        name = args[0] if args else ""
        if name and not name.startswith("-") and self.get_command(ctx, name) is None:
            near = nearest_name(name, self.list_commands(ctx))
            hint = f"; did you mean {near}?" if near else ""
            raise OneLineUsageError(f"{name}: no such command{hint} (see fringe --help)")
        return super().resolve_command(ctx, args)

    def invoke(self, ctx):
        """Run the command; a usage error while parsing its options becomes one line."""
        try:
            return super().invoke(ctx)
        except (OneLineUsageError, click.exceptions.NoArgsIsHelpError):
            raise
        except click.UsageError as exc:
            raise OneLineUsageError(usage_line(exc)) from None
