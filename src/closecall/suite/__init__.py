"""The model suite: the solver, the fits, proxy detection and the snapshot."""
