"""Exceptions a user can act on.

Owns: the error types raised for bad input and failed computations.
Must not import: anything else of chiropt.
"""

from __future__ import annotations


class ChiroptError(Exception):
    """Base class of all chiropt errors."""


class InputError(ChiroptError, ValueError):
    """Invalid user input (design or goal file, material spec, CLI argument).

    Parameters
    ----------
    key : str
        Key path in the input file (``particles[0].radius_nm``), or ``""``.
    message : str
        What was given and what is allowed.
    """

    def __init__(self, key: str, message: str):
        self.key = key
        self.message = message
        super().__init__(f"{key}: {message}" if key else message)


class MaterialRangeError(InputError):
    """A wavelength outside a material's data range."""


class ComputationError(ChiroptError, RuntimeError):
    """The computation itself failed (singular system, non-finite result)."""
