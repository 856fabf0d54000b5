"""The board fuzzer in CI: a small budget of random boards, none of which may crash or run past the time goal."""

import subprocess
import sys
from pathlib import Path

FUZZER = Path(__file__).resolve().parent / "fuzz_boards.py"


def test_random_boards_give_a_result_or_a_board_error():
    done = subprocess.run([sys.executable, str(FUZZER), "--examples", "150", "--seed", "2026"], capture_output=True,
                          text=True, timeout=600, check=False)
    assert done.returncode == 0, done.stdout[-4000:] + done.stderr[-4000:]
    assert "150 boards" in done.stdout and "crash" not in done.stdout.split(":", 1)[1].split(";")[0]
