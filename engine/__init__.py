"""Ceiling Lab engine: the ceiling model of electrostatic generators, without any user interface.

Modules, in the order data flows through them: ``units`` (quantity strings at the edge),
``carriers`` (charged area per revolution), ``air`` (air density and humidity), ``ceiling``
(the vectorised ceiling current), ``machines`` (machine descriptions and their TOML file).
"""

from engine.errors import CeilingLabError, InputError

__all__ = ["CeilingLabError", "InputError"]
