"""Shared helpers for the tests."""

import pytest


@pytest.fixture
def tmp_netlist(tmp_path):
    def write(text, name="circuit.mna"):
        path = tmp_path / name
        path.write_text(text, encoding="utf-8")
        return path

    return write
