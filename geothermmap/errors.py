"""Errors a user can cause. The CLI turns them into one message and exit code 1."""

from __future__ import annotations


class UserError(Exception):
    """A problem with the user's recipe or inputs, with a message that names the fix."""


class RecipeError(UserError):
    """The recipe is malformed or inconsistent."""


class InputError(UserError):
    """An input raster is missing, unreadable, or inconsistent with its declaration."""


class PhysicalBoundsError(UserError):
    """An input value is outside physical bounds while ``strict: true``."""
