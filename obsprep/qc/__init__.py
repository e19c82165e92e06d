"""Quality control: each test rejects rows under its own reason code (obsprep.reasons)."""

from .basic import basic_checks

__all__ = ["basic_checks"]
