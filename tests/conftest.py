"""Fixtures shared by several test files."""

import pytest


@pytest.fixture
def count(monkeypatch):
    """A list that gets the line of every synthesis the pipeline runs."""
    from synth.transfer import synthesize as mod
    calls, real = [], mod.synthesize_products

    def counted(snapshot, line, *a, **k):
        calls.append(str(line))
        return real(snapshot, line, *a, **k)
    monkeypatch.setattr(mod, "synthesize_products", counted)
    return calls
