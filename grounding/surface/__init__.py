"""Surface stage: the map of surface potentials, touch, step and mesh voltages per zone, and their worst points."""
