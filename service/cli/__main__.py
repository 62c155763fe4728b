"""``python -m service.cli``: the same command line as the ``sounding`` script."""

from service.cli import main

main()
