"""Every target's MicroPython players, run against a register model of the chip.

The emulator runs only the RP2040; the RP2350 (and RP2350B) modules run here, under
CPython, against ``rp2_model``: a register map built from that chip's vendor SDK headers
(``addressmap.h`` and one header per peripheral, pico-sdk 2.2.0), so each write is named
by the register the headers put at its address. Each player is made, plays its stream to
the end and is closed; then every write, every DMA destination and every DMA request
must be the ones the output means: the PWM slice of its pin and DMA pacing timer 0, or
the TX FIFO and registers of its own state machine; nothing else (never the PLL).
The RP2040 runs too, as a cross-check of the model against the emulated chip.
"""

from __future__ import annotations

import itertools
import re
from pathlib import Path

import pytest
from rp2_model import Chip, dreq_names, run_module
from test_targets import make_bundle

from ladderpack.targets import TARGETS

PIO_OUTPUTS = ["ladder", "ladder-stereo", "i2s", "i2c-dac"]


def _chip(target: str) -> Chip:
    t = TARGETS[target]
    return Chip(t.platform, t.sys_clock_hz)


def _sm_ids(target: str) -> list[int]:
    # the last state machine of the last block: PIO2 exists only on the RP2350
    return [0, 4 * TARGETS[target].pio_blocks - 1]


@pytest.mark.parametrize("output", PIO_OUTPUTS)
@pytest.mark.parametrize("target", sorted(TARGETS))
def test_pio_players_touch_only_their_state_machine(
    target: str, output: str, tmp_path: Path
) -> None:
    folder = make_bundle(tmp_path / "b", target, output)
    for sm_id in _sm_ids(target):
        chip = _chip(target)
        mod = run_module(folder / "t.py", chip)
        player = mod.Player(sm_id)
        player.play()
        player.close()
        block, x = divmod(sm_id, 4)
        allowed = {
            f"PIO{block}.{r}"
            for r in (
                f"SM{x}_CLKDIV",
                f"SM{x}_EXECCTRL",
                f"SM{x}_INSTR",
                "FDEBUG",
                "IRQ",
                f"TXF{x}",
            )
        }
        wrong = {reg for reg, _ in chip.writes} - allowed
        assert not wrong, (sm_id, wrong)
        assert (f"PIO{block}.SM{x}_CLKDIV", mod.CLKDIV_REG) in chip.writes
        assert {c["write"] for c in chip.dma_configs} == {f"PIO{block}.TXF{x}"}
        dreqs = dreq_names(chip.platform)
        assert {dreqs[c["treq_sel"]] for c in chip.dma_configs} == {f"DREQ_PIO{block}_TX{x}"}
        # every word of the stream went to the FIFO, in order
        sent = [v for reg, v in chip.writes if reg == f"PIO{block}.TXF{x}"]
        words = list(mod.WORDS)
        assert any(sent[k : k + len(words)] == words for k in range(len(sent) - len(words) + 1))


@pytest.mark.parametrize("output", ["pwm", "pwm-stereo", "pwm-timer"])
@pytest.mark.parametrize("target", sorted(TARGETS))
def test_pwm_players_touch_only_their_slice_and_timer0(
    target: str, output: str, tmp_path: Path
) -> None:
    folder = make_bundle(tmp_path / "b", target, output)
    chip = _chip(target)
    mod = run_module(folder / "t.py", chip)
    player = mod.Player()
    player.play()
    n = mod.SLICE
    slice_regs = {f"PWM.CH{n}_{r}" for r in ("CSR", "DIV", "CTR", "CC", "TOP")}
    wrong = {reg for reg, _ in chip.writes} - slice_regs - {"DMA.TIMER0"}
    assert not wrong
    assert chip.values[f"PWM.CH{n}_DIV"] == mod.DIV_REG
    assert chip.values[f"PWM.CH{n}_TOP"] == mod.TOP
    assert chip.values[f"PWM.CH{n}_CSR"] & 1  # enabled
    assert {c["write"] for c in chip.dma_configs} == {f"PWM.CH{n}_CC"}
    dreqs = {dreq_names(chip.platform)[c["treq_sel"]] for c in chip.dma_configs}
    if mod.TIMER_X:
        assert chip.values["DMA.TIMER0"] == (mod.TIMER_X << 16) | mod.TIMER_Y
        assert dreqs == {"DREQ_DMA_TIMER0"}
    else:
        assert "DMA.TIMER0" not in chip.values
        assert dreqs == {f"DREQ_PWM_WRAP{n}"}
    # the pin's slice: GPIO 2n and 2n + 1 on slices 0..7 (RP2040 and RP2350 datasheets,
    # PWM: "GPIO to PWM slice" tables)
    pin = int(re.search(r"^PIN = (\d+)", (folder / "t.py").read_text(), re.M).group(1))  # type: ignore[union-attr]
    assert n == (pin >> 1) & 7


@pytest.mark.parametrize("output", ["ladder", "ladder-stereo"])
def test_run_time_ramps_reach_their_end_within_max_step(tmp_path: Path, output: str) -> None:
    # The ramps a stop or a hold makes on the board, from every start code (every frame's
    # two ladders for stereo) to the idle code and to full scale: each step within the
    # stream's MAX_STEP, ending on the target. The stereo module once lacked _ramp_code
    # (it replaced the mono module's ramp functions wholesale) and raised NameError here.
    folder = make_bundle(tmp_path / "b", "rp2040", output)
    mod = run_module(folder / "t.py", _chip("rp2040"))
    n = mod.BITS // 2 if output == "ladder-stereo" else mod.BITS
    top = (1 << mod.BITS) - 1

    def halves(code: int) -> tuple[int, ...]:
        if output == "ladder":
            return (code,)
        return (code & ((1 << n) - 1), code >> n)

    for start in range(0, top + 1, max(1, top // 40)):
        for end in (mod.IDLE_CODE, top):
            codes = [
                mod._code_of(w >> mod._shift(k))
                for w in mod._ramp_words(start, end)
                for k in range(mod.SPW)
            ]
            seq = [halves(c) for c in [start, *codes]]
            pairs = itertools.pairwise(seq)
            steps = [abs(a[j] - b[j]) for a, b in pairs for j in range(len(a))]
            assert max(steps) <= max(mod.MAX_STEP, 1), (start, end)
            assert codes[-1] == end
