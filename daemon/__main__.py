"""`python -m taprig.daemon` runs the taprigd command line."""

from .cli import main

main()
