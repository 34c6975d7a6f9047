"""``python -m mna`` is the ``mna`` command."""

from .cli import entry

entry()
