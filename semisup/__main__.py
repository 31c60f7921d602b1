import sys

from .cli import main

if __name__ == "__main__":  # worker processes started with "spawn" re-import this module
    sys.exit(main())
