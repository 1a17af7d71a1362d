"""Argument types shared by the commands (a refusal exits with status 2, as argparse does)."""

from __future__ import annotations

import argparse


def whole_number(minimum: int):
    """An argparse ``type`` accepting whole numbers of at least ``minimum`` (refusals exit 2)."""

    def parse(text: str) -> int:
        try:
            value = int(text)
        except ValueError:
            raise argparse.ArgumentTypeError(f"must be a whole number, got {text!r}") from None
        if value < minimum:
            raise argparse.ArgumentTypeError(f"must be at least {minimum}, got {text!r}")
        return value

    parse.__name__ = "whole number"
    return parse
