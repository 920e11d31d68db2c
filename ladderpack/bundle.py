"""A bundle: the files of a stream asset, rendered by the emitters and written as a set."""

from __future__ import annotations

import os
from typing import Any

from ladderpack.asset import StreamAsset, StreamSummary
from ladderpack.defaults import EMBED_WORDS_MAX

__all__ = [
    "EMBED_WORDS_MAX",
    "StreamAsset",
    "StreamSummary",
    "bundle_files",
    "bundle_parts",
    "write_bundle",
]


def bundle_files(asset: StreamAsset, *, embed_words_max: int | None = None) -> dict[str, bytes]:
    """Render every output file of a bundle, sidecar last.

    Parameters
    ----------
    asset : StreamAsset
        The stream.
    embed_words_max : int, optional
        Streams of at most this many words are also embedded in the
        MicroPython module as a literal; longer ones are read from the
        ``.bin`` file on the board's filesystem.  Default: the asset's own
        ``embed_words_max`` option.

    Returns
    -------
    dict of str to bytes
        File name to content, in writing order (the sidecar is last).
    """
    from ladderpack.emit import binary, c, micropython, pioasm, sidecar

    if embed_words_max is None:
        embed_words_max = int(asset.options.get("embed_words_max", EMBED_WORDS_MAX))
    n = asset.name
    if _own_player(asset):
        made = {k: _bytes(v) for k, v in _output_parts(asset, embed_words_max).items()}
        made[f"{n}.json"] = sidecar.render(asset, made).encode()
        return made
    files: dict[str, bytes] = {
        f"{n}.bin": binary.render(asset.packed),
        f"{n}.h": c.render_header(asset).encode(),
        f"{n}.c": c.render_source(asset).encode(),
        f"{n}.py": micropython.render(asset, embed=asset.word_count <= embed_words_max).encode(),
        f"{n}.pio": pioasm.render(asset).encode(),
        **_ladder_player(asset),
    }
    files[f"{n}.json"] = sidecar.render(asset, files).encode()
    return files


def bundle_parts(asset: StreamAsset, *, embed_words_max: int | None = None) -> dict[str, Any]:
    """Like :func:`bundle_files`, but with the large files left lazy.

    The large files are byte chunks and the sidecar is made from the digests of the
    files written before it.

    For :func:`ladderpack.emit.write_files`; the bytes written are identical to
    :func:`bundle_files`.
    """
    from ladderpack.emit import binary, c, micropython, pioasm, sidecar

    if embed_words_max is None:
        embed_words_max = int(asset.options.get("embed_words_max", EMBED_WORDS_MAX))
    n = asset.name
    if _own_player(asset):
        return {
            **_output_parts(asset, embed_words_max),
            f"{n}.json": lambda digests: sidecar.render(asset, digests=digests).encode(),
        }
    return {
        f"{n}.bin": binary.render_chunks(asset.packed),
        f"{n}.h": c.render_header(asset).encode(),
        f"{n}.c": c.render_source_chunks(asset),
        f"{n}.py": micropython.render(asset, embed=asset.word_count <= embed_words_max).encode(),
        f"{n}.pio": pioasm.render(asset).encode(),
        **_ladder_player(asset),
        f"{n}.json": lambda digests: sidecar.render(asset, digests=digests).encode(),
    }


def _ladder_player(asset: StreamAsset) -> dict[str, bytes]:
    """The ladder player's two files: one ladder's, or two ladders' (stereo)."""
    from ladderpack.emit import player_c, player_stereo
    from ladderpack.pack import StereoLadderLayout

    if isinstance(asset.packed.layout, StereoLadderLayout):
        return {
            player_stereo.HEADER_NAME: player_stereo.render_header().encode(),
            player_stereo.SOURCE_NAME: player_stereo.render_source().encode(),
        }
    return {
        player_c.HEADER_NAME: player_c.render_header().encode(),
        player_c.SOURCE_NAME: player_c.render_source().encode(),
    }


def _is_i2s(asset: StreamAsset) -> bool:
    from ladderpack.outputs.i2s import I2sLayout

    return isinstance(asset.packed.layout, I2sLayout)


def _is_i2c(asset: StreamAsset) -> bool:
    from ladderpack.outputs.i2c_dac import I2cDacLayout

    return isinstance(asset.packed.layout, I2cDacLayout)


def _own_player(asset: StreamAsset) -> bool:
    """Whether the stream's files are another output's than the ladder's."""
    return _is_i2s(asset) or _is_i2c(asset) or asset.pwm is not None


def _bytes(content: Any) -> bytes:
    return content if isinstance(content, bytes) else b"".join(content)


def _output_parts(asset: StreamAsset, embed_words_max: int) -> dict[str, Any]:
    """The files of an I2S, PWM or I2C DAC stream but its sidecar (large ones as chunks)."""
    from ladderpack.emit import binary, i2s, micropython_i2s, player_i2s, player_pwm, pwm

    n = asset.name
    embed = asset.word_count <= embed_words_max
    if _is_i2c(asset):
        from ladderpack.emit import i2c_dac, player_i2c

        return {
            f"{n}.bin": binary.render_chunks(asset.packed),
            f"{n}.h": i2c_dac.render_header(asset).encode(),
            f"{n}.c": i2c_dac.render_source_chunks(asset),
            f"{n}.py": i2c_dac.render_micropython(asset, embed=embed).encode(),
            f"{n}.pio": i2c_dac.render_pio(asset).encode(),
            player_i2c.HEADER_NAME: player_i2c.render_header().encode(),
            player_i2c.SOURCE_NAME: player_i2c.render_source().encode(),
        }
    if asset.pwm is not None:
        return {
            f"{n}.bin": binary.render_chunks(asset.packed),
            f"{n}.h": pwm.render_header(asset).encode(),
            f"{n}.c": pwm.render_source_chunks(asset),
            f"{n}.py": pwm.render_micropython(asset, embed=embed).encode(),
            player_pwm.HEADER_NAME: player_pwm.render_header().encode(),
            player_pwm.SOURCE_NAME: player_pwm.render_source().encode(),
        }
    return {
        f"{n}.bin": binary.render_chunks(asset.packed),
        f"{n}.h": i2s.render_header(asset).encode(),
        f"{n}.c": i2s.render_source_chunks(asset),
        f"{n}.py": micropython_i2s.render(asset, embed=embed).encode(),
        f"{n}.pio": i2s.render_pio(asset).encode(),
        player_i2s.HEADER_NAME: player_i2s.render_header().encode(),
        player_i2s.SOURCE_NAME: player_i2s.render_source().encode(),
    }


def write_bundle(
    asset: StreamAsset, out_dir: str | os.PathLike[str], *, embed_words_max: int | None = None
) -> list[str]:
    """Render a bundle and write it atomically into `out_dir`.

    Returns the paths written.  See :func:`ladderpack.emit.write_files`.
    """
    import json

    from ladderpack.emit import write_files
    from ladderpack.errors import OutputError

    side = os.path.join(os.fspath(out_dir), f"{asset.name}.json")
    try:
        with open(side, encoding="utf-8") as fh:
            before = json.load(fh).get("options", {}).get("name")
    except (OSError, ValueError, AttributeError):
        before = None
    now = asset.options.get("name")
    if before is not None and now is not None and before != now:
        raise OutputError(
            f"the folder already holds the bundle of asset {before!r}, and {now!r} becomes the "
            f"same identifier {asset.name!r}; pick another name or folder",
            file=side,
            field="name",
        )
    return write_files(bundle_parts(asset, embed_words_max=embed_words_max), out_dir)
