"""Surrogates: kernels, the Gaussian process, two fidelities, posterior paths, diagnostics and their words, the set and its files."""
