"""Allow ``python -m boardheat``."""

from boardheat.cli import app

if __name__ == "__main__":
    app(prog_name="boardheat")
