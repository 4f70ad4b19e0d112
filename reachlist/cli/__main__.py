"""`python -m reachlist.cli`: the same command line as the `reachlist` script."""

from reachlist.cli import main

main()
