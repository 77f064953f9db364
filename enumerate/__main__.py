"""`python -m zeckenum` runs the command line."""

from zeckenum.cli.group import main

main()
