"""`python -m pocketforest`."""
import sys

from .cli import main

# Guarded: Dask's worker processes start with multiprocessing's "spawn", which imports the parent's
# main module again (as __mp_main__); an unguarded call would run the command once more per worker.
if __name__ == "__main__":
    sys.exit(main())
