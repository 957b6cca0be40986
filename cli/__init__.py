"""The ``stifflane`` command: starts each part of the stack (and, later, talks to the API)."""
