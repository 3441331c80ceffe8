"""The dsp package index: every public name is importable and listed in the docstring."""

import rundash.dsp as dsp


def test_public_names_indexed():
    for name in dsp.__all__:
        assert hasattr(dsp, name), name
        assert name in dsp.__doc__, name
