// Runs a flat RP2040 flash image on the rp2040js emulator (npm, MIT) with the PIO state
// machines stepped on a cycle-accurate schedule of our own, and records what reaches the
// pins. rp2040js models the PIO instruction set, FIFOs and DMA but not the clock divider
// or instruction delays, and steps the PIO from a timer of its own (vendor README); here
// every state machine gets a clock enable every CLKDIV system clocks (16.8 fixed point,
// RP2040 datasheet 3.5.5 "Clock Dividers": the fractional part stretches some periods by
// one clock), and an instruction with delay d occupies 1 + d enables (datasheet 3.4.1).
//
// Usage: node run.mjs CONFIG.json  ->  JSON on stdout
// CONFIG: { "image": flat binary, "bootrom": bootrom.mjs, "mailbox": address of the
//           firmware's report word, "max_cycles": limit, "end_value_op": op byte of the
//           final report, "tail_cycles": system clocks to keep running after it,
//           "sys_clock_hz": clock of the firmware (for the emulator's timer) }
// Output: { "events": [[cycle, value, pins], ...], "event_busy": [busy clocks at each],
//           "samples": {"pio.sm": [[cycle, pins], ...]},  one entry per executed OUT PINS
//           "final_pins": pins, "final_oe": output enables, "cycles": total, "ended": bool,
//           "busy_cycles": clocks the core executed (not asleep in WFI/WFE) }
import { readFileSync } from 'node:fs';
import { pathToFileURL } from 'node:url';
import { RP2040, ConsoleLogger, LogLevel, FIFO, USBCDC } from 'rp2040js';

const config = JSON.parse(readFileSync(process.argv[2], 'utf8'));
const { bootromB1 } = await import(pathToFileURL(config.bootrom).href);

const mcu = new RP2040();
mcu.logger = new ConsoleLogger(LogLevel.Error);
mcu.loadBootrom(bootromB1);
const image = readFileSync(config.image);
mcu.flash.set(image, 0);
// A filesystem image for MicroPython where its flash block device lies (the emulator
// cannot erase or program flash, so it is prepared on the host).
if (config.fs_image) mcu.flash.set(readFileSync(config.fs_image), config.fs_offset);
mcu.core.PC = 0x10000000;

const NANOS_PER_CYCLE = 1e9 / (config.sys_clock_hz || 125e6);
let cycle = 0;

// --- PIO: our own schedule -------------------------------------------------------------
const FJOIN_TX = 1 << 30;
for (const pio of mcu.pio) {
  pio.run = () => {}; // no timer-driven stepping: the loop below clocks the machines
  for (const sm of pio.machines) {
    sm.nextEnable = -1; // system clock of the next clock enable, -1: not yet scheduled
    sm.fracAcc = 0;
    sm.delayLeft = 0;
    // A state machine picks up FIFO data on its own clock, not at the instant the CPU or
    // the DMA writes it (rp2040js would complete a stalled instruction inside the write).
    sm.writeFIFO = function (value) {
      if (this.txFIFO.full) {
        this.pio.fdebug |= (1 << 16) << this.index; // TXOVER
        return;
      }
      this.txFIFO.push(value);
      this.pio.txStall &= ~((1 << 24) << this.index);
      this.updateDMATx();
    };
    // A restarted machine is no longer stalled: rp2040js keeps its stall level, which
    // would re-set FDEBUG.TXSTALL after the firmware clears it.
    const origRestart = sm.restart.bind(sm);
    sm.restart = function () {
      origRestart();
      this.pio.txStall &= ~((1 << 24) << this.index);
    };
    // FJOIN_TX: the TX FIFO takes the RX FIFO's storage, 8 entries (datasheet 3.5.4).
    const origWrite = sm.writeUint32.bind(sm);
    sm.writeUint32 = function (offset, value) {
      const before = this.shiftCtrl;
      origWrite(offset, value);
      if (offset === 0x08 && ((before ^ this.shiftCtrl) & FJOIN_TX)) {
        this.txFIFO = new FIFO(this.shiftCtrl & FJOIN_TX ? 8 : 4);
        this.updateDMATx();
      }
    };
  }
}

const samples = {};
let pinsCache = 0;

function pinWord() {
  let v = 0;
  for (let i = 0; i < 30; i++) {
    if (mcu.gpio[i].outputValue) v |= 1 << i;
  }
  return v >>> 0;
}
function oeWord() {
  let v = 0;
  for (let i = 0; i < 30; i++) {
    if (mcu.gpio[i].outputEnable) v |= 1 << i;
  }
  return v >>> 0;
}

function isOutPins(opcode) {
  return opcode >>> 13 === 0b011 && ((opcode >> 5) & 0x7) === 0;
}

// config.watch_pins: GPIOs whose every change is recorded as [cycle, value], bit k of
// value the level of watch_pins[k] (serial outputs such as I2S); OUT PINS samples are
// then not recorded.
const watch = config.watch_pins || null;
const changes = [];
let watched = -1;
function watchPins() {
  let v = 0;
  for (let k = 0; k < watch.length; k++) {
    if (mcu.gpio[watch[k]].outputValue) v |= 1 << k;
  }
  if (v !== watched) {
    watched = v;
    changes.push(cycle, v);
  }
}

function record(pioIndex, sm) {
  if (watch) return;
  const key = `${pioIndex}.${sm.index}`;
  sm.pio.checkChangedPins();
  (samples[key] ||= []).push([cycle, pinWord()]);
}

function clockMachine(pioIndex, sm) {
  if (sm.delayLeft > 0) {
    sm.delayLeft--;
    return;
  }
  const stalledPull = sm.pio.txStall;
  if (sm.waiting) {
    const opcode = sm.pio.instructions[sm.pc];
    const c0 = sm.cycles;
    sm.checkWait();
    if (!sm.waiting) {
      sm.delayLeft = sm.cycles - c0;
      if (isOutPins(opcode)) record(pioIndex, sm);
    }
    return;
  }
  const pc = sm.pc;
  const opcode = sm.pio.instructions[pc];
  const fifoEmpty = sm.txFIFO.empty;
  const c0 = sm.cycles;
  sm.updatePC = true;
  sm.executeInstruction(opcode);
  if (sm.updatePC) sm.nextPC();
  // PULL NOBLOCK on an empty FIFO copies X and does not stall (datasheet 3.4.7): rp2040js
  // flags TXSTALL for it, the hardware flags only blocking PULLs and autopull OUTs.
  if (opcode >>> 13 === 0b100 && opcode & 0x80 && !(opcode & 0x20) && fifoEmpty) {
    const bit = (1 << 24) << sm.index;
    sm.pio.txStall = (sm.pio.txStall & ~bit) | (stalledPull & bit);
    sm.pio.fdebug = (sm.pio.fdebug & ~bit) | (stalledPull & bit);
  }
  if (!sm.waiting) {
    sm.delayLeft = sm.cycles - c0 - 1;
    if (isOutPins(opcode)) record(pioIndex, sm);
  }
}

function divider(sm) {
  const whole = sm.clockDivInt === 0 ? 65536 : sm.clockDivInt;
  sm.fracAcc += sm.clockDivFrac;
  if (sm.fracAcc >= 256) {
    sm.fracAcc -= 256;
    return whole + 1;
  }
  return whole;
}

function tickPIO() {
  for (let p = 0; p < 2; p++) {
    const pio = mcu.pio[p];
    for (const sm of pio.machines) {
      if (!sm.enabled) {
        sm.nextEnable = -1;
        sm.delayLeft = 0;
        continue;
      }
      if (sm.nextEnable < 0) {
        sm.nextEnable = cycle; // the divider starts counting when the machine is enabled
        sm.fracAcc = 0;
      }
      if (cycle === sm.nextEnable) {
        clockMachine(p, sm);
        sm.nextEnable = cycle + divider(sm);
        if (watch) {
          pio.checkChangedPins();
          watchPins();
        }
      }
    }
  }
}

// --- PWM slices and DMA pacing: our own schedule ------------------------------------------
// rp2040js runs the PWM counters from a timer of its own and leaves a slice's DMA request
// raised once set, and paces DMA timers in floating-point microseconds. Here each enabled
// slice counts every DIV system clocks (8.4 fixed point: the fraction stretches some
// counts by one clock; RP2040 datasheet 4.5.2.4), wraps after TOP (one period is TOP + 1
// counts), latches the compare register it was given at the wrap (double-buffered,
// 4.5.2.3) and asks the DMA for one transfer (DREQ_PWM_WRAP0 + slice); a pacing timer
// asks once every Y / X system clocks (2.5.3.3). config.pwm_slices: the slices whose
// every period is recorded as [cycle of the wrap, slice, CC latched for the new period].
const PWM_DREQ0 = 24;
const TIMER_DREQ0 = 59;
const pwmOn = Array.isArray(config.pwm_slices);
const ownTreq = (t) =>
  pwmOn && ((t >= PWM_DREQ0 && t < PWM_DREQ0 + 8) || (t >= TIMER_DREQ0 && t < TIMER_DREQ0 + 4));
for (const ch of mcu.dma.channels) {
  const orig = ch.scheduleTransfer.bind(ch);
  ch.scheduleTransfer = function () {
    if (!ownTreq(this.treqValue)) orig();
  };
}
const origSetDREQ = mcu.dma.setDREQ.bind(mcu.dma);
mcu.dma.setDREQ = (d) => {
  if (pwmOn && d >= PWM_DREQ0 && d < PWM_DREQ0 + 8) return;
  origSetDREQ(d);
};
// One request, one transfer of each channel that was waiting for it: a channel started by
// a chain inside this request waits for the next one.
function request(treq) {
  const ready = mcu.dma.channels.filter((ch) => ch.treqValue === treq && ch.active && ch.transCount > 0);
  for (const ch of ready) ch.transfer();
}
const pwmWatch = new Set(config.pwm_slices || []);
const periods = [];
const slices = mcu.pwm.channels.map(() => ({ on: false, ctr: 0, next: 0, frac: 0, cc: 0 }));
function pwmDiv(ch, st) {
  const whole = (ch.div >> 4) & 0xff || 256;
  st.frac += ch.div & 0xf;
  if (st.frac >= 16) {
    st.frac -= 16;
    return whole + 1;
  }
  return whole;
}
const timerAcc = [0, 0, 0, 0];
const TIMER_KEYS = ['timer0', 'timer1', 'timer2', 'timer3'];
function tickPWM() {
  const chans = mcu.pwm.channels;
  for (let i = 0; i < chans.length; i++) {
    const ch = chans[i];
    const st = slices[i];
    if (!(ch.csr & 1)) {
      st.on = false;
      continue;
    }
    if (!st.on) {
      st.on = true; // enabled: counting starts from the counter's value
      st.ctr = 0;
      st.frac = 0;
      st.next = cycle + pwmDiv(ch, st);
      st.cc = ch.cc;
      if (pwmWatch.has(i)) periods.push(cycle, i, st.cc);
      continue;
    }
    if (cycle < st.next) continue;
    st.next = cycle + pwmDiv(ch, st);
    if (st.ctr >= (ch.top & 0xffff)) {
      st.ctr = 0;
      st.cc = ch.cc >>> 0;
      if (pwmWatch.has(i)) periods.push(cycle, i, st.cc);
      request(PWM_DREQ0 + i);
    } else {
      st.ctr++;
    }
  }
  const dma = mcu.dma;
  if ((dma.timer0 | dma.timer1 | dma.timer2 | dma.timer3) === 0) return;
  for (let t = 0; t < 4; t++) {
    const reg = dma[TIMER_KEYS[t]] >>> 0;
    const x = reg >>> 16;
    const y = reg & 0xffff;
    if (!x || !y) continue;
    timerAcc[t] += x;
    if (timerAcc[t] >= y) {
      timerAcc[t] -= y;
      request(TIMER_DREQ0 + t);
    }
  }
}

// --- an I2C bus with one device that acknowledges --------------------------------------
// config.i2c = {sda, scl, address, ack}: both lines are open-drain with pull-ups, so a
// line is low when the chip drives it low (an output at 0) or the device does. The device
// follows START, STOP and the clock (UM10204) only as far as it must to acknowledge: after
// the eighth bit of a byte it holds SDA low for the ninth clock, if `ack` is set and the
// transaction's first byte is its address (7 bits, then R/W = 0). Every change of the
// wire levels is recorded as [cycle, scl | sda << 1] for the test's own decoder.
const bus = config.i2c || null;
const wire = [];
const dev = { scl: 1, sda: 1, low: false, bit: 0, byte: 0, first: true, acking: false, mine: false };
function driven(pin) {
  const g = mcu.gpio[pin];
  return g.outputEnable && !g.outputValue;
}
function tickI2C() {
  const scl = driven(bus.scl) ? 0 : 1;
  const sda = driven(bus.sda) || dev.low ? 0 : 1;
  if (scl === dev.scl && sda === dev.sda) return;
  wire.push(cycle, scl | (sda << 1));
  if (scl && dev.scl && sda !== dev.sda) {
    // START (SDA falls) or STOP (SDA rises) while SCL is high
    dev.bit = 0;
    dev.byte = 0;
    dev.first = true;
    dev.acking = false;
    dev.low = false;
  } else if (scl && !dev.scl) {
    if (dev.bit < 8) {
      dev.byte = (dev.byte << 1) | sda;
      dev.bit++;
    }
  } else if (!scl && dev.scl) {
    if (dev.acking) {
      dev.acking = false;
      dev.low = false;
      dev.bit = 0;
      dev.byte = 0;
    } else if (dev.bit === 8) {
      if (dev.first) dev.mine = dev.byte === ((bus.address << 1) & 0xff);
      dev.first = false;
      dev.acking = true;
      dev.low = !!bus.ack && dev.mine;
    }
  }
  dev.scl = scl;
  dev.sda = driven(bus.sda) || dev.low ? 0 : 1;
  mcu.gpio[bus.scl].setInputValue(!!scl);
  mcu.gpio[bus.sda].setInputValue(!!dev.sda);
}
if (bus) {
  mcu.gpio[bus.scl].setInputValue(true);
  mcu.gpio[bus.sda].setInputValue(true);
}

// --- mailbox ---------------------------------------------------------------------------
const events = [];
const eventBusy = []; // the core's busy clocks (see the main loop) at each report
let endedAt = -1;
const mailbox = config.mailbox >>> 0;
const origWrite32 = mcu.writeUint32.bind(mcu);
mcu.writeUint32 = (address, value) => {
  origWrite32(address, value);
  if (address >>> 0 === mailbox) {
    events.push([cycle, value >>> 0, pinWord()]);
    eventBusy.push(busy);
    if (value >>> 24 === config.end_value_op && endedAt < 0) endedAt = cycle;
  }
};

// --- REPL over USB CDC (MicroPython) ----------------------------------------------------
// config.repl: a list of steps {code, interrupt_after?}. Each step's code runs through
// the raw REPL (Ctrl-A, code, Ctrl-D); with interrupt_after, Ctrl-C follows that many
// system clocks after the code was sent. Serial output is recorded with its time.
const serial = [];
let serialText = '';
let replStep = -1;
let replState = 'boot';
let interruptAt = -1;
let cdc = null;
function send(text) {
  for (const ch of Buffer.from(text, 'latin1')) cdc.sendSerialByte(ch);
}
function nextReplStep() {
  replStep++;
  if (replStep >= config.repl.length) {
    replState = 'done';
    endedAt = cycle;
    return;
  }
  const st = config.repl[replStep];
  serialText = '';
  replState = 'running';
  serial.push([cycle, `<<step ${replStep}>>`]);
  send(st.code + '\x04');
  interruptAt = st.interrupt_after !== undefined ? cycle + st.interrupt_after : -1;
}
if (config.repl) {
  cdc = new USBCDC(mcu.usbCtrl);
  cdc.onDeviceConnected = () => {
    replState = 'connecting';
    send('\r\x03\x03\x01'); // stop anything, enter the raw REPL
  };
  cdc.onSerialData = (buffer) => {
    const text = Buffer.from(buffer).toString('latin1');
    serial.push([cycle, text]);
    serialText += text;
    if (replState === 'connecting' && serialText.includes('raw REPL; CTRL-B to exit\r\n>')) {
      nextReplStep();
    } else if (replState === 'running') {
      // raw REPL: OK, stdout, \x04, stderr, \x04, then the prompt '>'
      const parts = serialText.split('\x04');
      if (parts.length >= 3 && parts[2].startsWith('>')) nextReplStep();
    }
  };
}

// --- main loop -------------------------------------------------------------------------
const maxCycles = config.max_cycles;
const tail = config.tail_cycles || 0;
const core = mcu.core;
let busy = 0;
while (cycle < maxCycles) {
  if (endedAt >= 0 && cycle >= endedAt + tail) break;
  if (interruptAt >= 0 && cycle >= interruptAt) {
    interruptAt = -1;
    serial.push([cycle, '<<ctrl-c>>']);
    send('\x03');
  }
  let n = 1;
  if (!core.waiting) {
    n = core.executeInstruction();
    busy += n; // clocks the core executes; WFI/WFE sleep counts as idle
  }
  for (let k = 0; k < n; k++) {
    cycle++;
    mcu.clock.tick(NANOS_PER_CYCLE);
    tickPIO();
    if (pwmOn) tickPWM();
    if (bus) tickI2C();
  }
}
for (const pio of mcu.pio) pio.checkChangedPins();
process.stdout.write(
  JSON.stringify({
    events,
    samples,
    final_pins: pinWord(),
    final_oe: oeWord(),
    changes,
    periods,
    wire,
    cycles: cycle,
    busy_cycles: busy,
    event_busy: eventBusy,
    ended: endedAt >= 0,
    serial,
  }),
);
void pinsCache;
