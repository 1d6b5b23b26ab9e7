import pytest

import libconf


@pytest.fixture
def ring_of():
    """First ring of a molecule (medium given explicitly in each test)."""

    def _ring(smiles, medium="nonpolar", temperature=298.15, index=0):
        return libconf.analyze(smiles, medium=medium, temperature=temperature).rings[index]

    return _ring
