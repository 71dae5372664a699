"""`python -m taprig.client` runs the taprig command line."""

from .cli import main

main()
