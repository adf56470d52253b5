"""The physics: constants, the spin model and its Hamiltonian, lattices, drive protocols,
imperfections, and the dense propagators that are the reference for everything compiled."""
