"""`python -m fitkit` runs the command line."""

from .cli import main

main()
