"""``python -m taprig.daemon.api --openapi``: print the service's OpenAPI document."""

from __future__ import annotations

import argparse
import sys
from collections.abc import Sequence

from .openapi import openapi_text


def main(argv: Sequence[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description="taprig rig service")
    parser.add_argument("--openapi", action="store_true", help="print the OpenAPI document")
    args = parser.parse_args(argv)
    if args.openapi:
        sys.stdout.write(openapi_text())
    else:
        parser.print_help()


if __name__ == "__main__":
    main()
