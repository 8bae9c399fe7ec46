"""`python -m pipeline` runs the `shockflow` command."""

from pipeline.cli import main

main()
