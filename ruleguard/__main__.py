"""``python -m ruleguard``."""

from ruleguard.cli import console

console()
