"""`python -m service.cli`: the same as the `berth` console script."""

from service.cli.commands import main

main()
