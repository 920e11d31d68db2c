"""SPI DAC streams on the emulated chip: the C player and the MicroPython module.

Whole bundles of :mod:`ladderpack.outputs.spi_dac` go through the bundle's C player
(``ladderpack_spi.c``, built from its template with the vendor SDK 2.2.0, warnings as
errors) and its MicroPython module (the vendored v1.27.0 image), on rp2040js with the
state machines clocked by the harness's schedule; every change of SCK, CS, SDI and LDAC
is recorded. The test's own decoder reads the lines as the DAC does, from the data
sheet's write command and timing diagram (Microchip MCP4822/MCP4922 data sheets, from
memory: a frame is 16 bits taken on SCK's rising edges while CS is low, A/B, BUF, GA,
SHDN and then D11..D0; the input register is written when CS rises; LDAC low moves the
input registers to the outputs), and measures every time of the data sheet's timing
table on the recorded lines against its minimum (``TIMING_NS``, from memory).
"""

from __future__ import annotations

import itertools
import json
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pytest
from chip.harness import Firmware, player_app, run, run_micropython

from ladderpack.bundle import bundle_files, write_bundle
from ladderpack.outputs.spi_dac import TIMING_NS
from ladderpack.stream import stream_tone

pytestmark = pytest.mark.slow

SDI, SCK = 6, 7  # CS on GPIO 8, LDAC on GPIO 9
WATCH = [SCK, SCK + 1, SDI, SCK + 2]  # bit 0 SCK, 1 CS, 2 SDI, 3 LDAC of each change
NS_PER_CLOCK = 8.0  # the emulated system clock, 125 MHz


@pytest.fixture(scope="module")
def fw(tmp_path_factory: pytest.TempPathFactory) -> Firmware:
    return Firmware(tmp_path_factory.mktemp("fw_spi"))


@dataclass
class Frame:
    fall: int  # CS falling, system clocks
    rise: int  # CS rising: the DAC writes its input register
    bits: list[int]
    edges: list[int]  # SCK rising edges

    @property
    def word(self) -> int:
        return int("".join(map(str, self.bits)), 2) if self.bits else -1

    @property
    def channel(self) -> int:
        return self.word >> 15

    @property
    def header(self) -> int:
        return self.word >> 12

    @property
    def code(self) -> int:
        return self.word & 0xFFF


@dataclass
class Wire:
    frames: list[Frame] = field(default_factory=list)
    latches: list[int] = field(default_factory=list)  # LDAC falling edges
    times: dict[str, int] = field(default_factory=dict)  # shortest of each time, clocks


def decode(changes: np.ndarray) -> Wire:
    """Frames, LDAC pulses and the shortest of each timing-table time, from the changes."""
    w = Wire()
    best = {k: 1 << 62 for k in TIMING_NS}

    def note(key: str, clocks: int) -> None:
        best[key] = min(best[key], clocks)

    prev = int(changes[0][1]) if len(changes) else 0b1010
    sck_at = sdi_at = ldac_at = 0
    cur: Frame | None = None
    last_rise: int | None = None  # CS's
    pending_hold: int | None = None  # an SCK rise waiting for SDI's next change
    for cycle, v in changes[1:]:
        c, v = int(cycle), int(v)
        sck, cs, sdi, ldac = v & 1, (v >> 1) & 1, (v >> 2) & 1, (v >> 3) & 1
        psck, pcs, psdi, pldac = prev & 1, (prev >> 1) & 1, (prev >> 2) & 1, (prev >> 3) & 1
        if sdi != psdi:
            if pending_hold is not None:
                note("data_hold", c - pending_hold)
                pending_hold = None
            sdi_at = c
        if cs != pcs:
            if not cs:  # fall: a frame starts
                if last_rise is not None:
                    note("cs_high", c - last_rise)
                cur = Frame(c, 0, [], [])
            elif cur is not None:  # rise: written
                cur.rise = c
                if cur.edges:
                    note("cs_hold", c - cur.edges[-1])
                w.frames.append(cur)
                cur, last_rise = None, c
        if sck != psck:
            if cur is not None:
                note("sck_low" if sck else "sck_high", c - sck_at)
            if sck and cur is not None and cs == 0:  # a rising edge inside a frame
                if not cur.edges:
                    note("cs_setup", c - cur.fall)
                note("data_setup", c - max(sdi_at, cur.fall))
                cur.edges.append(c)
                cur.bits.append(sdi)
                pending_hold = c
            sck_at = c
        if ldac != pldac:
            if not ldac:
                w.latches.append(c)
                if last_rise is not None:
                    note("latch_setup", c - last_rise)
            else:
                note("latch_low", c - ldac_at)
            ldac_at = c
        prev = v
    w.times = {k: v for k, v in best.items() if v < 1 << 62}
    return w


def assert_timing_met(w: Wire, *, latch: bool) -> None:
    """Every time of the data sheet's table, as recorded, at least its minimum."""
    want = set(TIMING_NS)
    if not latch:
        want -= {"latch_setup", "latch_low"}
    assert want <= set(w.times), sorted(want - set(w.times))
    for key in want:
        assert w.times[key] * NS_PER_CLOCK >= TIMING_NS[key], (key, w.times[key])


@dataclass
class Bundle:
    folder: Path
    name: str

    @property
    def side(self) -> dict:
        return json.loads((self.folder / f"{self.name}.json").read_text())

    @property
    def period(self) -> int:
        s = self.side
        return int(s["clock"]["div_int"]) * int(s["stats"]["spi_dac"]["cycles_per_sample"])

    @property
    def channels(self) -> int:
        return int(self.side["stats"]["spi_dac"]["channels"])

    @property
    def idle(self) -> int:
        return int(self.side["stream"]["idle_code"])

    def _codes(self, words: np.ndarray) -> list[int]:
        # every slot of every word goes on the wires (a mono stream's last pad included)
        w = words.astype(np.int64)
        return np.stack([(w >> 20) & 0xFFF, (w >> 8) & 0xFFF], axis=1).reshape(-1).tolist()

    @property
    def codes(self) -> list[int]:
        return self._codes(np.fromfile(self.folder / f"{self.name}.bin", dtype="<u4"))

    def part(self, key: str) -> list[int]:
        src = (self.folder / f"{self.name}.c").read_text()
        symbol = f"{self.name}_{key}_words"
        if symbol not in src:
            return []
        body = src.split(f"{symbol}[", 1)[1].split("{", 1)[1].split("}", 1)[0]
        words = [int(t.strip().rstrip("u"), 16) for t in body.split(",") if t.strip()]
        return self._codes(np.array(words, dtype=np.uint32))


BASE: dict[str, object] = {
    "output": "spi-dac",
    "data_pin": SDI,
    "bit_clock_pin": SCK,
    "rate_hz": 16000.0,
    "freq_hz": 500.0,
    "seconds": 0.01,
    "ramp_ms": 1.0,
}


def make(folder: Path, name: str, **opts: object) -> Bundle:
    """Write the bundle; what should come out. A compressed stream's (--compress lossless)
    is read from the same stream made uncompressed, in ``folder/plain``."""
    kind = str(opts.pop("kind", "sine"))
    write_bundle(stream_tone(kind, name=name, **{**BASE, **opts}), folder)
    if opts.get("compress", "none") == "none":
        return Bundle(folder, name)
    plain = folder / "plain"
    plain.mkdir(exist_ok=True)
    write_bundle(stream_tone(kind, name=name, **{**BASE, **opts, "compress": "none"}), plain)
    return Bundle(plain, name)


#: Every C and MicroPython scenario runs on the stream as words and compressed (issue 31).
COMPRESS = pytest.mark.parametrize("compress", ["none", "lossless"])


def c_app(name: str, ops: list[tuple[str, int]], tail: str = "") -> str:
    return player_app(
        name,
        ops,
        header="ladderpack_spi.h",
        fn="lp_spi",
        player_type="lp_spi_player_t",
        stream_type="lp_spi_stream_t",
        init_macro="SPI_INIT",
        tail=tail,
    )


def wire_run(fw: Firmware, folder: Path, name: str, ops: list[tuple[str, int]], tail: str = ""):
    image = fw.make(folder, [], [], app=c_app(name, ops, tail))
    return run(image, fw.mailbox(), extra={"watch_pins": WATCH})


def assert_on_ticks(times: list[int], period: int) -> None:
    d = np.diff(np.array(times))
    assert np.all(d == period), np.unique(d)


@COMPRESS
def test_c_player_writes_every_frame_on_its_tick(
    fw: Firmware, tmp_path: Path, compress: str
) -> None:
    b = make(tmp_path, "tone", compress=compress)
    r = wire_run(fw, tmp_path, "tone", [("init", 0), ("start", 0), ("wait", 0)])
    assert r.ended and r.results()[:2] == [0, 0]
    w = decode(r.changes)
    assert all(len(f.bits) == 16 for f in w.frames)  # 16 clocks a frame, no more, no less
    # DAC A, BUF 0, GA 1 (gain 1x), SHDN 1 (on): 0b0011
    assert {f.header for f in w.frames} == {0b0011}
    assert [f.code for f in w.frames] == b.codes  # every code, in order
    assert_on_ticks([f.rise for f in w.frames], b.period)  # one write a sample period
    assert b.codes[0] == b.idle and b.codes[-1] == b.idle
    assert_timing_met(w, latch=False)
    assert not w.latches


@COMPRESS
def test_c_player_stereo_latches_both_channels_together(
    fw: Firmware, tmp_path: Path, compress: str
) -> None:
    b = make(tmp_path, "duo", stereo=True, latch=True, dac_gain=2, vref_buffer=True, freq_hz=700.0,
             compress=compress)  # fmt: skip
    r = wire_run(fw, tmp_path, "duo", [("init", 0), ("start", 0), ("wait", 0)])
    assert r.ended and r.results()[:2] == [0, 0]
    w = decode(r.changes)
    assert all(len(f.bits) == 16 for f in w.frames)
    # A then B each sample: A/B, BUF 1, GA 0 (gain 2x), SHDN 1
    assert [f.header for f in w.frames] == [0b0101, 0b1101] * (len(w.frames) // 2)
    assert [f.code for f in w.frames] == b.codes
    # one LDAC pulse a sample, after both frames were written, on the sample clock
    assert len(w.latches) == len(w.frames) // 2
    for k, t in enumerate(w.latches):
        assert w.frames[2 * k + 1].rise < t
        assert k + 1 == len(w.latches) or t < w.frames[2 * k + 2].fall
    assert_on_ticks(w.latches, b.period)
    assert_timing_met(w, latch=True)


@COMPRESS
def test_c_player_stop_ramps_down_from_the_code_it_was_on(
    fw: Firmware, tmp_path: Path, compress: str
) -> None:
    b = make(tmp_path, "cut", seconds=0.05, ramp_ms=0.0, kind="dc", dc_value=0.9, compress=compress)
    period = b.period
    r = wire_run(fw, tmp_path, "cut", [("init", 0), ("start", 0), ("delay", 200 * period),
                                       ("stop", 0)])  # fmt: skip
    assert r.ended and r.results()[:2] == [0, 0]
    w = decode(r.changes)
    assert_on_ticks([f.rise for f in w.frames], period)  # no gap where the stop came in
    codes = [f.code for f in w.frames]
    n = 0
    while n < len(codes) and codes[n] == b.codes[n]:
        n += 1
    assert 150 < n < len(b.codes) - 64, n
    ramp = codes[n:]
    assert len(ramp) == 64 and ramp[-1] == b.idle  # LP_SPI_RAMP_SAMPLES, down to idle
    assert all(x >= y for x, y in zip([codes[n - 1], *ramp], ramp, strict=False))


@COMPRESS
def test_c_player_loop_then_a_held_level(fw: Firmware, tmp_path: Path, compress: str) -> None:
    b = make(tmp_path, "wobble", loop=True, seconds=0.004, compress=compress)
    intro, outro = b.part("intro"), b.part("outro")
    tail = (
        "    rc = lp_spi_hold_code(&player, 1234u); report(12u, 0u, rc);\n"
        "    rc = lp_spi_hold_code(&player, 5000u); report(12u, 1u, rc);\n"
    )
    pass_clocks = len(b.codes) * b.period
    ops = [("init", 0), ("start", 1), ("delay", int(2.5 * pass_clocks + len(intro) * b.period)),
           ("request_stop", 0), ("wait", 0)]  # fmt: skip
    r = wire_run(fw, tmp_path, "wobble", ops, tail=tail)
    assert r.ended and r.results()[:2] == [0, 0]
    assert [(v >> 8 & 0xFF, v & 0xFF) for _c, v, _p in r.events if v >> 24 == 12] == [
        (0, 0),
        (1, 0xF9),  # LP_SPI_ERR_CODE (-7)
    ]
    w = decode(r.changes)
    codes = [f.code for f in w.frames]
    assert codes[-2:] == [1234, 1234]  # the DC level on demand (one word: two samples)
    codes = codes[:-2]
    assert_on_ticks([f.rise for f in w.frames[:-2]], b.period)
    k = len(intro)
    assert codes[:k] == intro and codes[len(codes) - len(outro) :] == outro
    body = codes[k : len(codes) - len(outro)]
    passes, rest = divmod(len(body), len(b.codes))
    assert rest == 0 and passes >= 2 and body == b.codes * passes  # whole passes


def test_player_builds_for_rp2350(fw2350: Firmware, tmp_path: Path) -> None:
    make(tmp_path, "tone", target="rp2350b", data_pin=34, bit_clock_pin=35, latch=True)
    ops = [("init", 0), ("start", 0), ("wait", 0)]
    image = fw2350.make(tmp_path, [], [], app=c_app("tone", ops))
    assert image.stat().st_size > 0


def board(folder: Path, name: str, *, embed: bool, **opts: object) -> tuple[dict, Bundle]:
    """A MicroPython board's files (the module, and the .bin unless embedded: a compressed
    stream's always), and what should come out (see :func:`make`)."""
    kind = str(opts.pop("kind", "sine"))
    asset = stream_tone(kind, name=name, **{**BASE, **opts})
    files = bundle_files(asset, embed_words_max=100_000 if embed else 0)
    for fname, data in files.items():
        (folder / fname).write_bytes(data)
    keep = [f"{name}.py"] + ([] if embed and asset.compressed is None else [f"{name}.bin"])
    expected = folder / "expected"
    expected.mkdir()
    return {k: files[k] for k in keep}, make(expected, name, kind=kind, **opts)


@pytest.mark.parametrize(
    ("embed", "compress"),
    [(True, "none"), (False, "none"), (False, "lossless")],
    ids=["embedded", "file", "compressed"],
)
def test_micropython_writes_every_frame(tmp_path: Path, embed: bool, compress: str) -> None:
    files, b = board(tmp_path, "hum", embed=embed, chunk_words=64, compress=compress)
    steps = [{"code": "import hum\np = hum.Player()\np.play()\np.hold_code(3000)\n"}]
    r = run_micropython(files, steps, tmp_path, watch_pins=WATCH)
    assert r.ended and "Traceback" not in r.output(), r.output()[-2000:]
    w = decode(r.changes)
    codes = [f.code for f in w.frames]
    assert codes[:-2] == b.codes and codes[-2:] == [3000, 3000]
    assert {f.header for f in w.frames} == {0b0011}
    assert_on_ticks([f.rise for f in w.frames[:-2]], b.period)
    assert_timing_met(w, latch=False)


@COMPRESS
def test_micropython_stereo_ctrl_c_ramps_both_channels_down(tmp_path: Path, compress: str) -> None:
    files, b = board(
        tmp_path, "drone", embed=True, stereo=True, latch=True, kind="dc", dc_value=0.7,
        seconds=0.1, ramp_ms=0.0, compress=compress, chunk_words=256,
    )  # fmt: skip
    steps = [
        {"code": "import drone\np = drone.Player()\n"},
        {"code": "p.play()\n", "interrupt_after": 5_000_000},  # 40 ms in
    ]
    r = run_micropython(files, steps, tmp_path, watch_pins=WATCH)
    assert r.ended and "KeyboardInterrupt" in r.output(), r.output()[-2000:]
    w = decode(r.changes)
    codes = [f.code for f in w.frames]
    n = 0
    while n < len(codes) and codes[n] == b.codes[n]:
        n += 1
    assert 0 < n < len(b.codes) - 128 and n % 2 == 0, n
    ramp = codes[n:]
    assert len(ramp) == 128 and ramp[-2:] == [b.idle, b.idle]  # 64 samples, both channels
    for ch in (0, 1):
        seq = [codes[n - 2 + ch], *ramp[ch::2]]
        assert all(x >= y for x, y in itertools.pairwise(seq))
    # the stream on its ticks up to the stop; the ramp, made while the FIFO drains (the
    # DAC holds its codes if it runs dry first), on its own ticks
    cut = n // 2
    assert_on_ticks(w.latches[:cut], b.period)
    assert_on_ticks(w.latches[cut:], b.period)
    assert w.latches[cut] - w.latches[cut - 1] >= b.period
    assert_timing_met(w, latch=True)
