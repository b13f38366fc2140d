"""Run the command line as ``python -m placer``."""

from placer._entry import main

main()
