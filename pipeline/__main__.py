"""`python -m pipeline` runs the `shockflow` command."""

from pipeline.cli import main

if __name__ == "__main__":  # Dask's worker processes re-import this module: never run it twice
    main()
