"""`python -m shockflow` runs the `shockflow` command."""

from shockflow.cli import main

if __name__ == "__main__":  # a worker process that re-imports this module must not run it again
    main()
