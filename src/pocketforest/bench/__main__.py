"""`python -m pocketforest.bench`."""
import sys

from .cli import main

sys.exit(main())
