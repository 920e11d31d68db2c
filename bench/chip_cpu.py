"""The chip's side of performance: CPU time and RAM of each player, on the emulated chip.

Run:  python bench/chip_cpu.py [--seconds 0.25] [--only c|micropython] [--match TEXT]

Needs what the firmware tests need (``tests/chip/harness.py``: the pico-sdk by
``PICO_SDK_PATH``, arm-none-eabi-gcc, CMake, Node.js with rp2040js, the MicroPython
image and the boot ROM; ``../shared/vendor`` in a development checkout). Benchmarks
only: the tests never time.

How each figure is measured (RP2040 at 125 MHz on rp2040js, the players as generated):

* **C players**: the application starts the player, then sleeps (``sleep_us``: WFE
  until a timer alarm) for the stream's length, then waits for the end asleep between
  polls. ``tests/chip/run.mjs`` counts the clocks the core executes (WFI/WFE sleep is
  idle), so the CPU share while playing is the busy clocks during that sleep over its
  length: what the player's DMA chain and interrupts take from the application (the
  sleep's own wake-up is included). ``start`` and ``stop`` are one-off costs, in
  clocks. RAM: the player's structure (``arm-none-eabi-nm -S`` of the application's
  ``player``) plus the player's own static data.
* **MicroPython players**: the player polls its DMA channel while a buffer plays; the
  benchmark wraps the channel so each poll's waiting time (from the first poll that
  finds it busy to the one that finds it idle, ``time.ticks_us``) is added up. The CPU
  share is one less the waiting time over the play time: reading the file, the ramps
  and the bookkeeping (the wrapper's own calls count as work, so it is an upper
  bound). RAM: ``gc.mem_free()`` before and after making the player (its buffers).
"""

from __future__ import annotations

import argparse
import re
import subprocess
import sys
import tempfile
from dataclasses import dataclass
from pathlib import Path
from typing import Any

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "tests"))

from chip.harness import (  # noqa: E402 - the tests' harness, found beside this script
    Firmware,
    player_app,
    run,
    run_micropython,
)

from ladderpack import outputs  # noqa: E402
from ladderpack.bundle import bundle_files, write_bundle  # noqa: E402
from ladderpack.stream import stream_tone  # noqa: E402

SYS_HZ = 125_000_000
RATE_HZ = 22050.0
#: An I2C DAC at 400 kHz updates at most about 9 kHz (three bytes and a start a sample).
I2C_RATE_HZ = 8000.0
VERBOSE = False
MATCH = ""  # --match
BUS = {"sda": 4, "scl": 5, "address": 0x60, "ack": 1}


@dataclass
class Case:
    label: str
    output: str
    options: dict[str, object]
    loop: bool = False
    extra: dict[str, object] | None = None
    clip: str | None = None  # a demo clip instead of a tone (its whole length plays)
    clip_s: float | None = None  # only this much of the clip, from 0.5 s in (slow outputs)


def cases() -> list[Case]:
    """One stream a player (and a loop for the ladder), each at its usual rate."""
    return [
        Case("ladder, stream", "ladder", {"bits": 8, "rate_hz": RATE_HZ}),
        Case("ladder, loop", "ladder", {"bits": 8, "rate_hz": RATE_HZ, "loop": True}, True),
        Case(
            "ladder, compressed spoken demo clip",
            "ladder",
            {"bits": 8, "rate_hz": RATE_HZ, "compress": "lossless"},
            clip="frost_warning.flac",
        ),
        Case(
            "ladder, compressed chime demo clip, 12-bit",
            "ladder",
            {"bits": 12, "rate_hz": RATE_HZ, "compress": "lossless"},
            clip="door_chime.flac",
        ),
        Case(
            "stereo ladder, stream",
            "ladder",
            {"bits": 8, "rate_hz": RATE_HZ, "stereo": True, "out_base": 0},
        ),
        Case("I2S, stream", "i2s", {"rate_hz": RATE_HZ, "data_pin": 2, "bit_clock_pin": 3}),
        Case(
            "I2S, ADPCM spoken demo clip",
            "i2s",
            {"rate_hz": RATE_HZ, "data_pin": 2, "bit_clock_pin": 3, "compress": "adpcm"},
            clip="frost_warning.flac",
        ),
        Case("PWM, stream", "pwm", {"rate_hz": RATE_HZ, "pwm_pin": 2}),
        Case(
            "I2C DAC, stream",
            "i2c-dac",
            {"rate_hz": I2C_RATE_HZ, "sda_pin": BUS["sda"], "scl_pin": BUS["scl"]},
            extra={"i2c": BUS},
        ),
        Case("SPI DAC, stream", "spi-dac", {"rate_hz": 16000.0, "data_pin": 2, "bit_clock_pin": 3}),
        *compressed_cases(),
    ]


def compressed_cases() -> list[Case]:
    """The compressed streams of every output but the ladder's.

    The spoken demo clip, or half a second of it where the emulator is slow (PWM: about
    1.4 M clocks a second of host time) or a tone pair for stereo.
    """
    i2s = {"rate_hz": RATE_HZ, "data_pin": 2, "bit_clock_pin": 3}
    spi = {"rate_hz": 16000.0, "data_pin": 2, "bit_clock_pin": 3, "compress": "lossless"}
    i2c = {"rate_hz": I2C_RATE_HZ, "sda_pin": BUS["sda"], "scl_pin": BUS["scl"]}
    clip = "frost_warning.flac"
    return [
        Case("I2S, lossless spoken demo clip", "i2s", {**i2s, "compress": "lossless"}, clip=clip),
        Case(
            "I2S stereo, lossless tone pair",
            "i2s",
            {**i2s, "compress": "lossless", "stereo": True},
        ),
        Case("I2S stereo, ADPCM tone pair", "i2s", {**i2s, "compress": "adpcm", "stereo": True}),
        Case(
            "PWM, lossless, 0.5 s of the spoken clip",
            "pwm",
            {"rate_hz": RATE_HZ, "pwm_pin": 2, "compress": "lossless"},
            clip=clip,
            clip_s=0.5,
        ),
        Case(
            "SPI DAC, lossless, 0.5 s of the spoken clip (16 kHz)",
            "spi-dac",
            spi,
            clip=clip,
            clip_s=0.5,
        ),
        Case(
            "I2C DAC, lossless, 0.5 s of the spoken clip (8 kHz)",
            "i2c-dac",
            {**i2c, "compress": "lossless"},
            extra={"i2c": BUS},
            clip=clip,
            clip_s=0.5,
        ),
    ]


def _asset(case: Case, name: str, seconds: float) -> Any:  # a StreamAsset
    opts = dict(case.options)
    if case.clip is not None and case.clip_s is not None:
        from ladderpack.audio import Signal, load_clip
        from ladderpack.stream import stream_signal

        sig = load_clip(str(ROOT / "demo_audio" / case.clip))
        a, b = int(0.5 * sig.rate_hz), int((0.5 + case.clip_s) * sig.rate_hz)
        part = Signal(sig.samples[a:b], sig.rate_hz)
        return stream_signal(part, name=name, output=case.output, **opts)
    if case.clip is not None:
        from ladderpack.stream import stream_clip

        return stream_clip(
            str(ROOT / "demo_audio" / case.clip), name=name, output=case.output, **opts
        )
    if case.loop:
        opts["cycles"] = 20
    else:
        opts["seconds"] = seconds
    if case.output in outputs.takers("level"):
        opts["ramp_ms"] = 1.0
    return stream_tone("sine", name=name, freq_hz=440.0, output=case.output, **opts)


def _nm_sizes(elf: Path) -> dict[str, int]:
    text = subprocess.run(
        ["arm-none-eabi-nm", "-S", "--size-sort", str(elf)], check=True, capture_output=True,
        text=True,
    ).stdout  # fmt: skip
    out = {}
    for line in text.splitlines():
        parts = line.split()
        if len(parts) == 4 and parts[2] in "bBdD":
            out[parts[3]] = int(parts[1], 16)
    return out


def c_row(fw: Firmware, work: Path, case: Case, seconds: float) -> str:
    entry = outputs.entry(case.output)
    short = outputs.short_name(case.output)
    name = "cpu_" + re.sub(r"\W+", "_", case.label.lower()).strip("_")
    folder = work / name
    asset = _asset(case, name, seconds)
    write_bundle(asset, folder)
    stereo = bool(case.options.get("stereo")) and case.output == "ladder"  # its own player
    fn = "lp_stereo" if stereo else f"lp_{short}"
    stems = list(entry.players)
    header = f"{stems[1] if stereo else stems[0]}.h"
    macro = ("STEREO" if stereo else short.upper()) + "_INIT"
    play_us = int((asset.duration_s if case.clip else seconds) * 1e6)
    ops = [("init", 0), ("start", 1 if case.loop else 0), ("sleep", play_us)]
    ops += [("request_stop", 0)] if case.loop else []
    ops += [("sleep_wait", 2000)]
    app = player_app(
        name,
        ops,
        header=header,
        fn=fn,
        player_type=f"{fn}_player_t",
        stream_type=f"{fn}_stream_t",
        init_macro=macro,
        init_args="&player, &stream" if case.output == "pwm" else "&player, &stream, pio0",
    )
    image = fw.make(folder, [], [], app=app)
    extra = dict(case.extra or {})
    if case.output == "pwm":  # the emulator paces PWM DMA only for the slices it watches
        extra["pwm_slices"] = [int(asset.stats["pwm"]["slice"])]
    r = run(image, fw.mailbox(), max_cycles=int(SYS_HZ * (play_us / 1e6 + 2)), extra=extra)
    if not r.ended:
        raise SystemExit(f"{case.label}: the firmware did not finish")
    bad = [rc for rc in r.results() if rc != 0]
    if bad:
        raise SystemExit(f"{case.label}: a player call failed ({bad})")
    c = [e[0] for e in r.events]
    b = r.event_busy
    start_clk = b[1] - b[0]
    sleep_cycles, sleep_busy = c[2] - c[1], b[2] - b[1]
    stop_clk = (b[3] - b[2]) if case.loop else None
    sizes = _nm_sizes(fw.build / "lp_fw.elf")
    own = {k: v for k, v in sizes.items() if k.startswith(("lp_" + short, "lp_common", fn))}
    ram = sizes.get("player", 0) + sum(own.values())
    if VERBOSE:
        print(f"  {case.label}: player {sizes.get('player')} B, own {own}", file=sys.stderr)
    share = 100.0 * sleep_busy / sleep_cycles
    return (
        f"| C | {case.label} | {share:.3f} % | {start_clk} | "
        f"{stop_clk if stop_clk is not None else '-'} | {ram} B |"
    )


#: A module on the board's filesystem: a DMA channel whose polls add up their waiting.
def c_baseline(fw: Firmware, work: Path, seconds: float) -> float:
    """Busy share of the same sleep with no player running (its own wake-ups), %."""
    case = cases()[0]
    name = "cpu_idle"
    write_bundle(_asset(case, name, seconds), work / name)
    app = player_app(
        name,
        [("init", 0), ("sleep", int(seconds * 1e6))],
        header="ladderpack_player.h",
        fn="lp_ladder",
        player_type="lp_ladder_player_t",
        stream_type="lp_ladder_stream_t",
        init_macro="LADDER_INIT",
    )
    r = run(fw.make(work / name, [], [], app=app), fw.mailbox(), max_cycles=int(SYS_HZ * 3))
    c, b = [e[0] for e in r.events], r.event_busy
    return 100.0 * (b[1] - b[0]) / (c[1] - c[0])


MP_TIMED = """
import time
class Timed:
    def __init__(s, d):
        s.d = d; s.wait = 0; s.t = None
    def active(s, *a):
        r = s.d.active(*a)
        if a:
            return r
        now = time.ticks_us()
        if r:
            if s.t is None:
                s.t = now
        elif s.t is not None:
            s.wait += time.ticks_diff(now, s.t); s.t = None
        return r
    def __getattr__(s, k):
        return getattr(s.d, k)
"""


def mp_rows(work: Path, seconds: float) -> list[str]:
    """The MicroPython ladder player (file, embedded, loop), I2S and I2C DAC from files.

    (The PWM player keeps two DMA channels in flight and is not measured this way.)
    """
    specs = [
        ("ladder, file stream", "mpf", Case("", "ladder", {"bits": 8, "rate_hz": RATE_HZ}), False),
        ("ladder, embedded", "mpe", Case("", "ladder", {"bits": 8, "rate_hz": RATE_HZ}), True),
        (
            "ladder, compressed spoken demo clip",
            "mpz",
            Case(
                "",
                "ladder",
                {"bits": 8, "rate_hz": RATE_HZ, "compress": "lossless"},
                clip="frost_warning.flac",
            ),
            False,
        ),
        (
            "ladder, file loop",
            "mpl",
            Case("", "ladder", {"bits": 8, "rate_hz": RATE_HZ, "loop": True}, True),
            False,
        ),
        (
            "I2S, file stream",
            "mpi",
            Case("", "i2s", {"rate_hz": RATE_HZ, "data_pin": 2, "bit_clock_pin": 3}),
            False,
        ),
        (
            "I2S, ADPCM spoken demo clip",
            "mpa",
            Case(
                "",
                "i2s",
                {"rate_hz": RATE_HZ, "data_pin": 2, "bit_clock_pin": 3, "compress": "adpcm"},
                clip="frost_warning.flac",
            ),
            False,
        ),
        (
            "I2C DAC, file stream (8 kHz)",
            "mpc",
            Case(
                "",
                "i2c-dac",
                {"rate_hz": I2C_RATE_HZ, "sda_pin": BUS["sda"], "scl_pin": BUS["scl"]},
            ),
            False,
        ),
    ]
    for k, case in enumerate(compressed_cases()):
        if case.output != "pwm":  # (see above)
            specs.append((case.label, f"mpk{k}", case, False))
    rows = []
    for label, name, case, embed in specs:  # a fresh board each: PIO program space is small
        if MATCH and MATCH not in label:
            continue
        asset = _asset(case, name, seconds)
        made = bundle_files(asset, embed_words_max=10**7 if embed else 0)
        files = {"cpu_timed.py": MP_TIMED.encode(), f"{name}.py": made[f"{name}.py"]}
        if not embed:
            files[f"{name}.bin"] = made[f"{name}.bin"]
        loop_code = (
            "from machine import Timer\n"
            f"Timer(period={int(seconds * 1000)}, mode=Timer.ONE_SHOT, "
            "callback=lambda t: p.stop())\n"
            if case.loop
            else ""
        )
        code = (
            "import time, gc\nfrom cpu_timed import Timed\n"
            f"import {name}\ngc.collect()\nm0 = gc.mem_free()\np = {name}.Player()\n"
            "gc.collect()\nram = m0 - gc.mem_free()\np.dma = Timed(p.dma)\n"
            + loop_code
            + f"t0 = time.ticks_us()\np.play({'loop=True' if case.loop else ''})\n"
            "T = time.ticks_diff(time.ticks_us(), t0)\n"
            "print('RESULT', T, p.dma.wait, ram)\np.close()\n"
        )
        play_s = asset.duration_s if case.clip else seconds
        folder = work / name
        folder.mkdir()
        r = run_micropython(
            files, [{"code": code}], folder, max_cycles=int(SYS_HZ * (play_s + 6)), i2c=BUS
        )
        found = re.findall(r"RESULT (\d+) (\d+) (-?\d+)", r.output())
        if len(found) != 1:
            raise SystemExit(f"MicroPython run of {label} failed:\n" + r.output()[-3000:])
        t, w, ram = found[0]
        share = 100.0 * (int(t) - int(w)) / int(t)
        rows.append(f"| MicroPython | {label} | {share:.1f} % | - | - | {ram} B |")
    return rows


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__)
    ap.add_argument("--seconds", type=float, default=0.25, help="audio per case, s")
    ap.add_argument("--only", choices=["c", "micropython"], help="one kind of player")
    ap.add_argument("--match", default="", help="only the streams whose label has this text")
    args = ap.parse_args()
    global MATCH
    MATCH = args.match
    with tempfile.TemporaryDirectory() as tmp:
        work = Path(tmp)
        print(
            f"ladderpack players on the emulated RP2040 at {SYS_HZ // 1_000_000} MHz, "
            f"{args.seconds} s of audio each"
        )
        print("| player | stream | CPU while playing | start, clocks | stop, clocks | RAM |")
        print("|---|---|---|---|---|---|")
        if args.only != "micropython":
            fw = Firmware(work / "fw")
            idle = c_baseline(fw, work, args.seconds)
            print(f"| C | no player, the same sleep (its own wake-ups) | {idle:.3f} % | | | |")
            for case in cases():
                if not MATCH or MATCH in case.label:
                    print(c_row(fw, work, case, args.seconds), flush=True)
        if args.only != "c":
            mp = work / "mp"
            mp.mkdir()
            for row in mp_rows(mp, args.seconds):
                print(row, flush=True)


if __name__ == "__main__":
    main()
