"""Run the command line as ``python -m placer``."""

from placer.cli import cli

cli(prog_name="placer")
