"""Operators stage: the Galerkin mutual-resistance matrix (dense or compressed), hierarchical matrices, the
potential operator at arbitrary points and the compressed inductance operator."""
