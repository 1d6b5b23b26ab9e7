"""3D computations on ring conformers: both chairs (RDKit ETKDG + MMFF94) and GFN2-xTB energies.

``chairs`` needs only RDKit and numpy. ``xtb`` needs the optional ``tblite`` package
and scipy; import it only where GFN2-xTB is wanted.
"""

from .chairs import TWIST, ChairConformer, ChairPair, both_chairs, chair_label, force_flip, placement

__all__ = ["TWIST", "ChairConformer", "ChairPair", "both_chairs", "chair_label", "force_flip", "placement"]
