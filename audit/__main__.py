"""`python -m audit` runs the `sortition` command."""

from audit._cli import main

main()
