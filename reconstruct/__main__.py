import sys

from reconstruct.cli import main

if __name__ == "__main__":
    sys.exit(main())
