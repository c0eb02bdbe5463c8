"""The shell's commands, one module per group; importing this package fills
the command table (`shell.registry.COMMANDS`), in the order `help` lists them."""

from . import model, data, grid, refining, questions, arrivals, views, session, journal  # noqa: F401,I001
