"""doc_sections: an override's docstring completed with the numpydoc sections of the contract it implements
(the section layout is that of the numpydoc docstring guide, numpydoc.readthedocs.io, "Sections")."""

from __future__ import annotations

import inspect

import pytest

from sim.core.docs import doc_sections


def _contract(x):
    """Twice ``x``.

    Parameters
    ----------
    x : float

    Returns
    -------
    float
    """
    return 2 * x


def test_own_summary_then_the_contract_sections():
    @doc_sections(_contract)
    def own(x):
        """Twice ``x``, added
        to itself."""
        return x + x

    doc = inspect.getdoc(own)
    assert doc.startswith("Twice ``x``, added\nto itself.\n\nParameters\n----------\nx : float\n")
    assert doc.endswith("Returns\n-------\nfloat")
    assert own(1.5) == 3.0  # the function itself is unchanged


def test_without_a_docstring_the_whole_contract():
    @doc_sections(_contract)
    def own(x):
        return x + x

    assert inspect.getdoc(own) == inspect.getdoc(_contract)


def test_a_source_without_sections_is_refused():
    def bare():
        """Only a summary."""

    with pytest.raises(ValueError, match="no numpydoc section"):
        doc_sections(bare)
