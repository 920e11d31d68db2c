"""Make the demo clips of the garden weather-station scenario.

Run from the repository root:  python demo_audio/make_clips.py

* ``door_chime.flac``: a two-note "ding-dong" alert, synthesised here from
  inharmonic bell-like partials with exponential decays, 44.1 kHz stereo
  (the right channel is a slightly delayed copy, to exercise the downmix).
* ``frost_warning.flac``: a short spoken alert made with espeak-ng
  (Debian package espeak-ng), 22.05 kHz mono.

Both are our own material.  The FLAC files are committed so the demo runs
without espeak-ng; this script documents exactly how they were made.
"""

from __future__ import annotations

import os
import subprocess
import tempfile

import numpy as np
import soundfile

HERE = os.path.dirname(os.path.abspath(__file__))


def door_chime(rate_hz: int = 44100) -> np.ndarray:
    """Two bell strikes, E5 then C5, each with four partials."""
    t = np.arange(int(2.2 * rate_hz)) / rate_hz
    out = np.zeros_like(t)
    partials = ((1.0, 1.0, 1.6), (2.76, 0.45, 0.9), (5.40, 0.25, 0.5), (8.93, 0.12, 0.3))
    for start_s, f0 in ((0.0, 659.26), (0.55, 523.25)):
        tt = t - start_s
        on = tt >= 0
        for ratio, amp, decay_s in partials:
            env = np.where(on, np.exp(-np.clip(tt, 0, None) / decay_s), 0.0)
            attack = np.clip(tt / 0.004, 0.0, 1.0)
            out += amp * env * attack * np.sin(2 * np.pi * f0 * ratio * np.clip(tt, 0, None))
    out *= 0.5 / np.max(np.abs(out))
    delay = int(0.0007 * rate_hz)
    right = np.concatenate([np.zeros(delay), out[:-delay]])
    return np.stack([out, right], axis=1)


def frost_warning(path: str) -> None:
    """Speak the alert with espeak-ng and save it as FLAC."""
    text = "Frost warning. The garden temperature is below zero."
    with tempfile.TemporaryDirectory() as tmp:
        wav = os.path.join(tmp, "speech.wav")
        subprocess.run(["espeak-ng", "-v", "en", "-s", "150", "-w", wav, text], check=True)
        data, rate = soundfile.read(wav)
    soundfile.write(path, data, rate, subtype="PCM_16")


def main() -> None:
    soundfile.write(os.path.join(HERE, "door_chime.flac"), door_chime(), 44100, subtype="PCM_16")
    frost_warning(os.path.join(HERE, "frost_warning.flac"))


if __name__ == "__main__":
    main()
