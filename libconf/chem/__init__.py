"""Chemistry of saturated six-membered rings: perception, faces, energies, barriers.

These modules take RDKit molecules and know nothing of files.
"""
