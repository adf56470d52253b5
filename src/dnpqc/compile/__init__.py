"""From the physics to a program: Trotter circuits, strategies, processors, mapping onto the
coupling graph, folding, gate and time budgets, and the processor's noise model."""
