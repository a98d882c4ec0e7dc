"""Write the OpenAPI document of the application: ``python -m service.openapi_export FILE``."""

from __future__ import annotations

import argparse
import json
import logging
from pathlib import Path
from typing import Any

from service.app import create_app
from service.settings import Settings

__all__ = ["main", "openapi_document", "openapi_text"]

logger = logging.getLogger(__name__)


def openapi_document() -> dict[str, Any]:
    """The OpenAPI document of an application built with default settings."""
    document: dict[str, Any] = create_app(Settings()).openapi()
    return document


def openapi_text() -> str:
    """The document as stable, sorted, indented JSON text with a final newline."""
    return json.dumps(openapi_document(), indent=2, sort_keys=True, ensure_ascii=False) + "\n"


def main(argv: list[str] | None = None) -> int:
    """Write the document to the file named on the command line."""
    parser = argparse.ArgumentParser(description=__doc__)
    parser.add_argument("output", type=Path, help="file to write, e.g. openapi/openapi.json")
    args = parser.parse_args(argv)
    args.output.parent.mkdir(parents=True, exist_ok=True)
    args.output.write_text(openapi_text(), encoding="utf-8")
    logger.info("wrote %s", args.output)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
