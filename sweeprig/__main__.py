"""``python -m sweeprig``: the command line."""

from sweeprig.cli.main import main

main()
