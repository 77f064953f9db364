"""`python -m zeckenum` runs the command line."""

from .cli import main

main()
