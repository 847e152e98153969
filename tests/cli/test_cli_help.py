"""Help texts: every command and option explains itself in the analyst's words."""

from __future__ import annotations

import click
from click.testing import CliRunner

from tracker.cli import main


def _walk():
    ctx = click.Context(main)
    for name in main.list_commands(ctx):
        yield name, main.get_command(ctx, name)


def test_every_command_and_option_has_help():
    missing = []
    for name, command in _walk():
        if not (command.help or "").strip():
            missing.append(name)
        for param in command.params:
            if isinstance(param, click.Option) and not (param.help or "").strip():
                missing.append(f"{name} {param.opts[0]}")
    assert missing == []


def test_technical_terms_come_with_plain_words():
    # The technical name stays, in parentheses, after a plain explanation.
    ctx = click.Context(main)
    fit = {p.opts[0]: p.help for p in main.get_command(ctx, "fit").params if isinstance(p, click.Option)}
    align = {p.opts[0]: p.help for p in main.get_command(ctx, "align").params if isinstance(p, click.Option)}
    assert fit["--smooth"].startswith("How strongly to resist changes of position from one period to the next")
    assert "(change penalty, " in fit["--smooth"]
    assert "(overlap weight)" in align["--overlap-weight"] and "shared members" in align["--overlap-weight"]
    assert "(link threshold)" in align["--link-threshold"] and "new track starts" in align["--link-threshold"]
    out = CliRunner().invoke(main, ["fit", "--help"], terminal_width=80).output
    assert "Penalty (nats)" not in out
