"""Shared helpers: board files written into tmp_path, the CLI runner."""

from __future__ import annotations

import textwrap
from pathlib import Path

import pytest
from typer.testing import CliRunner

REPO = Path(__file__).resolve().parents[1]
DATA = Path(__file__).resolve().parent / "data"


@pytest.fixture
def runner():
    return CliRunner()


@pytest.fixture
def write_board(tmp_path):
    """Write a board file from TOML text and return its path."""

    def write(text: str, name: str = "board.toml") -> Path:
        path = tmp_path / name
        path.write_text(textwrap.dedent(text), encoding="utf-8")
        return path

    return write


# A small valid board used as the starting point for malformed variants.
BASE_BOARD = """\
title = "Test board"
guard_band = "6 dB"
limit = "cispr32-class-b-radiated-10m"

[[clock]]
name = "clk"
frequency = "50 MHz"
rise_time = "1 ns"
swing = "3.3 V"
load = { resistance = "50 ohm" }
paths = ["loop1"]

[[path]]
name = "loop1"
kind = "loop"
area = "1 cm2"
"""
