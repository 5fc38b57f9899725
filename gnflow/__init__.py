"""gnflow: laminar flows of generalized Newtonian fluids by finite elements."""
