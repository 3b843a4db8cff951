"""Drivers: the pipeline (one resolved config through every stage), exact derivatives of its observables, fits, scans, executors, progress."""
