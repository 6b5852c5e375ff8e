import sys

from .cli import main

if __name__ == "__main__":  # worker processes started by Dask import this module again
    sys.exit(main())
