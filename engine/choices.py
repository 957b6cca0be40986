"""The names a job spec may choose, without loading the compiled engine.

The API validates job specs against these (schemas/job.py) and must not import numba, so
the constants live here, in a module that imports nothing; the integrator and the
machine-code tier import them from here.
"""

# Integration methods on the wire: each describes its method (docs/engine.md, "Methods").
METHODS = ("auto", "dormand_prince_54", "radau_iia_5", "rosenbrock_4", "bdf")

# The machine-code option of a job (engine.kernels.native.choose holds the policy).
MACHINE_CODE_AUTO, MACHINE_CODE_ALWAYS, MACHINE_CODE_NEVER = "auto", "always", "never"
MACHINE_CODE_MODES = (MACHINE_CODE_AUTO, MACHINE_CODE_ALWAYS, MACHINE_CODE_NEVER)
