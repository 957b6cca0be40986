"""Compiled kernels: the register-machine program format (``program``), its numba
interpreter (``vm``) and the machine-code tier generated from the same programs (``native``)."""
