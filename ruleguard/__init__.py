"""ruleguard: a static design-rule checker for feedback-control configurations.

The public Python API lives in :mod:`ruleguard.api`; importing this package is
cheap (no numpy, no scipy) so that the command starts fast in a pre-commit hook.
"""

__version__ = "0.1.0"

__all__ = ["__version__"]
