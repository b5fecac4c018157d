"""Allow ``python -m boardheat``."""

from boardheat.cli import app

app(prog_name="boardheat")
