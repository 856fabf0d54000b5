"""The board fuzzer in CI: a small budget of random boards, none of which may crash or run away.

The 2 s time goal itself is a measurement (``python tests/fuzz_boards.py`` prints the slowest board); a timed
unit test would fail on a busy machine, so CI only catches boards that take five times that, the mark of one
the budget should have refused.
"""

import subprocess
import sys
from pathlib import Path

FUZZER = Path(__file__).resolve().parent / "fuzz_boards.py"


def test_random_boards_give_a_result_or_a_board_error():
    done = subprocess.run([sys.executable, str(FUZZER), "--examples", "150", "--seed", "2026", "--time-goal", "10"],
                          capture_output=True, text=True, timeout=600, check=False)
    assert done.returncode == 0, done.stdout[-4000:] + done.stderr[-4000:]
    assert "150 boards" in done.stdout and "crash" not in done.stdout.split(":", 1)[1].split(";")[0]


def test_mutated_scans_ibis_files_and_captures_give_a_result_or_one_input_error(tmp_path):
    # common practice, no source: a reader either reads a file or names what is wrong with it, never crashes
    import random

    from emispec.capture import analyse
    from emispec.errors import InputError
    from emispec.ibis import read_ibis
    from emispec.readers import read_capture, read_scan
    from test_ibis import DRIVER, rc_table

    rng = random.Random(2026)
    tokens = ["", "NA", "nan", "inf", "-1", "0", "1e309", "abc", "1.2n", "1/0", "0/1n", "/", "=", "[", "]", "|",
              "3.3V", "1,5", ";", "\t", "1e-30"]

    def mutate(text: str) -> str:
        lines = text.splitlines()
        for _ in range(rng.randint(1, 6)):
            i = rng.randrange(len(lines))
            words, op = lines[i].split(), rng.random()
            if op < 0.2:
                del lines[i]
                continue
            if op < 0.4:
                lines.insert(i, rng.choice(lines))
                continue
            if op < 0.8 and words:
                words[rng.randrange(len(words))] = rng.choice(tokens)
            else:
                words.append(rng.choice(tokens))
            lines[i] = rng.choice([" ", ";", "\t", ","]).join(words)
        return "\n".join(lines) + "\n"

    def analysed(path):
        data = read_capture(path)
        return analyse(data.time_s, data.voltage_v, data.file)

    scan = "Type;Receiver\nDistance;3 m\nFrequency [MHz];PK [dBuV/m];AV [dBuV/m]\n" + "".join(
        f"{30 + i * 0.05:.3f};{20 + i % 7};{15 + i % 5}\n" for i in range(200))
    capture = "Time (ns),CH1 (V)\n" + "".join(f"{i * 0.1:.2f},{3.3 if (i // 50) % 2 else 0}\n" for i in range(2000))
    path = tmp_path / "mutated.txt"
    for _ in range(150):
        for base, reader in ((scan, read_scan), (DRIVER.replace("{rising}", rc_table(40)), read_ibis),
                             (capture, analysed)):
            path.write_text(mutate(base))
            try:
                reader(path)
            except InputError as err:
                assert "\n" not in str(err)
