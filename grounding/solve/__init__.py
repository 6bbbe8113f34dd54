"""Solve stage: the equipotential solve (Cholesky or conjugate gradients), the coupled metal–soil network solve,
and the solver policy (which solver, how much memory)."""
