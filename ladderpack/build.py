"""Manifest builds: many assets, incremental, with a depfile and a CI check mode.

A manifest (``ladderpack.toml``, read with the standard library's tomllib)::

    [project]
    out_dir = "generated"        # relative to the manifest

    [defaults]                   # any stream option, for every asset
    bits = 8
    rate_hz = 22050
    out_base = 16

    [[asset]]
    name = "door_chime"
    clip = "clips/door_chime.flac"

    [[asset]]
    name = "bench_tone"
    tone = "sine"
    freq_hz = 1000
    loop = true

    [[asset]]
    name = "sine_table"
    table = "wave"
    table_bits = 8

Every asset is fingerprinted from the tool version, its kind, its effective options
and the SHA-256 of each input file.  An asset whose fingerprint and outputs are
unchanged is skipped.  Only stdlib is imported until something has to be built, so
a no-op build is quick.
"""

from __future__ import annotations

import functools
import hashlib
import json
import math
import os
import re
import tomllib
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

from ladderpack import outputs
from ladderpack._version import __version__
from ladderpack.emit.names import PLAYER_FILES as _PLAYERS
from ladderpack.errors import LadderpackError

if TYPE_CHECKING:
    from concurrent.futures import Future

__all__ = ["STATE_NAME", "AssetSpec", "BuildResult", "Manifest", "build", "load_manifest"]

STATE_NAME = ".ladderpack-state.json"
INDEX_STEM = "assets"
#: The files bundles share (every output's C players), recorded once, not per asset.
PLAYER_FILES = tuple(f"{stem}.{ext}" for stem in _PLAYERS for ext in ("h", "c"))


def _types(cls_name: str) -> dict[str, tuple[type, ...]]:
    from ladderpack import options

    return options.manifest_types(getattr(options, cls_name))


_KIND_KEYS = ("clip", "tone", "table")


@dataclass(frozen=True)
class AssetSpec:
    """One asset of a manifest, with its effective options.

    Attributes
    ----------
    name : str
        Safe identifier.
    kind : {'clip', 'tone', 'table'}
        What it is made from.
    source : str
        The clip path (absolute), tone kind or table kind.
    options : dict
        Effective options (defaults merged with the asset's own keys); paths
        absolute.
    inputs : tuple of str
        Absolute paths of every input file (clip, levels file).
    """

    name: str
    kind: str
    source: str
    options: dict[str, Any]
    inputs: tuple[str, ...]


@dataclass(frozen=True)
class Manifest:
    """A parsed manifest."""

    path: str
    root: str
    out_dir: str
    assets: tuple[AssetSpec, ...]
    flash_bytes: int
    flash_reserve_bytes: int
    #: ``[project] over_flash = "warn"``: assets that together exceed the flash build
    #: with a warning instead of failing.
    over_flash_ok: bool = False


@dataclass
class BuildResult:
    """What a build did."""

    built: list[str] = field(default_factory=list)
    up_to_date: list[str] = field(default_factory=list)
    problems: list[tuple[str, str]] = field(default_factory=list)  # (asset, why) in check
    total_bytes: int = 0


def _err(path: str, message: str, asset: str | None = None, key: str | None = None) -> None:
    where = f"asset {asset!r}" if asset else None
    field_name = ".".join(p for p in (where, key) if p) or None
    raise LadderpackError(message, file=path, field=field_name)


def _check_types(
    path: str, asset: str | None, table: dict[str, Any], types: dict[str, tuple[type, ...]]
) -> None:
    for key, value in table.items():
        if key not in types:
            _err(path, f"unknown key; expected one of {', '.join(sorted(types))}", asset, key)
        allowed = types[key]
        if isinstance(value, bool) and bool not in allowed:
            _err(
                path,
                f"expected {' or '.join(t.__name__ for t in allowed)}, got a boolean",
                asset,
                key,
            )
        if not isinstance(value, allowed):
            _err(
                path,
                f"expected {' or '.join(t.__name__ for t in allowed)}, got "
                f"{type(value).__name__} {value!r}",
                asset,
                key,
            )


def load_manifest(
    path: str | os.PathLike[str], *, out_dir: str | os.PathLike[str] | None = None
) -> Manifest:
    """Read and validate a manifest.

    Parameters
    ----------
    path : str or path-like
        The manifest (TOML).
    out_dir : str or path-like, optional
        Output folder given on the command line, overriding the manifest's
        ``project.out_dir``.  Without it, the manifest's folder must lie inside
        the manifest's own folder (symlinks resolved): a manifest alone can never
        send outputs elsewhere.

    Raises
    ------
    LadderpackError
        Naming the file, the asset and the key for unknown keys, wrong types,
        missing or duplicate names, reserved names, an output folder outside the
        manifest's folder and impossible combinations.
    """
    from ladderpack.emit.names import asset_identifier
    from ladderpack.reading import MAX_DEPTH, check_regular_file, nesting_depth

    mpath = os.fspath(path)
    check_regular_file(mpath, what="manifest")
    try:
        with open(mpath, "rb") as fh:
            doc = tomllib.load(fh)
    except (OSError, tomllib.TOMLDecodeError, UnicodeDecodeError) as exc:
        raise LadderpackError(f"not valid TOML ({exc})", file=mpath) from None
    except RecursionError:
        raise LadderpackError("not valid TOML (nested too deeply)", file=mpath) from None
    if nesting_depth(doc) > MAX_DEPTH:
        raise LadderpackError(f"nested more than {MAX_DEPTH} levels deep", file=mpath)
    root = os.path.dirname(os.path.abspath(mpath))
    _check_types(
        mpath,
        None,
        {k: v for k, v in doc.items()},
        {"project": (dict,), "defaults": (dict,), "asset": (list,)},
    )
    project = doc.get("project", {})
    _check_types(mpath, None, project, {"out_dir": (str,), "over_flash": (str,)})
    over_flash = project.get("over_flash", "error")
    if over_flash not in ("error", "warn"):
        _err(mpath, f"expected 'error' or 'warn', got {over_flash!r}", None, "project.over_flash")
    defaults = doc.get("defaults", {})
    stream_types, tone_types, clip_types = (
        _types("StreamOptions"),
        {k: v for k, v in _types("ToneSpec").items() if k != "kind"},
        _types("ClipOptions"),
    )
    table_types = {
        "wave": _types("WaveTableSpec"),
        "correction": _types("CorrectionTableSpec"),
        "i2c-dac": _types("I2cDacTableSpec"),
    }
    all_types = {**stream_types, **tone_types, **clip_types}
    _check_types(mpath, None, defaults, all_types)
    if out_dir is not None:
        out = os.path.abspath(os.fspath(out_dir))
    else:
        out = _contained_out_dir(mpath, root, project.get("out_dir", "generated"))
    assets: list[AssetSpec] = []
    seen: dict[str, str] = {}
    for i, raw in enumerate(doc.get("asset", [])):
        if not isinstance(raw, dict):
            _err(mpath, f"asset {i + 1} must be a table", None, "asset")
        label = str(raw.get("name", f"#{i + 1}"))
        kinds = [k for k in _KIND_KEYS if k in raw]
        if len(kinds) != 1:
            _err(mpath, "give exactly one of clip, tone or table", label, ",".join(kinds) or "clip")
        kind = kinds[0]
        if "name" not in raw or not isinstance(raw["name"], str):
            _err(mpath, "every asset needs a name (a string)", label, "name")
        try:
            ident = asset_identifier(raw["name"])
        except LadderpackError as exc:
            _err(mpath, exc.message, label, "name")
        if ident in seen:
            _err(
                mpath,
                f"name {raw['name']!r} and {seen[ident]!r} both become {ident!r}",
                label,
                "name",
            )
        seen[ident] = raw["name"]
        if not isinstance(raw[kind], str):
            _err(mpath, "expected a string", label, kind)
        own = {k: v for k, v in raw.items() if k not in ("name", kind)}
        inputs: list[str] = []
        if kind == "table":
            if raw[kind] not in table_types:
                _err(mpath, f"expected one of {', '.join(table_types)}", label, "table")
            _check_types(mpath, label, own, table_types[raw[kind]])
            opts = dict(own)
            if raw[kind] == "correction" and "levels" not in opts:
                _err(mpath, "a correction table needs a levels file", label, "levels")
            source = raw[kind]
        else:
            types = {**stream_types, **(clip_types if kind == "clip" else tone_types)}
            _check_types(mpath, label, own, types)
            inherited = {k: v for k, v in defaults.items() if k in types}
            opts = {**inherited, **own}
            if kind == "clip":
                source = os.path.normpath(os.path.join(root, raw[kind]))
                inputs.append(source)
            else:
                source = raw[kind]
        if "levels" in opts:
            opts["levels"] = os.path.normpath(os.path.join(root, opts["levels"]))
            inputs.append(opts["levels"])
        if opts.get("cycles") is not None and "seconds" in own:
            _err(mpath, "give seconds or cycles, not both", label, "cycles")
        for p in inputs:
            why = _not_regular(p)
            if why:
                _err(
                    mpath,
                    f"input file {os.path.relpath(p, root)!r} {why}",
                    label,
                    kind if p == source else "levels",
                )
        opts = _validated(mpath, label, kind, source, opts)
        assets.append(AssetSpec(ident, kind, source, opts, tuple(inputs)))
    if not assets:
        _err(mpath, "no [[asset]] entries", None, "asset")
    from ladderpack.options import StreamOptions, from_mapping

    budget_keys = ("target", "flash_bytes", "flash_reserve_bytes")
    whole = from_mapping(
        StreamOptions,
        {k: defaults[k] for k in budget_keys if k in defaults},
        file=mpath,
        where="defaults",
    )
    flash, reserve = int(whole.flash_bytes or 0), whole.flash_reserve_bytes
    return Manifest(mpath, root, out, tuple(assets), flash, reserve, over_flash == "warn")


def _not_regular(path: str) -> str | None:
    """Why `path` cannot be read as an input file, or None."""
    from ladderpack.reading import check_regular_file

    try:
        check_regular_file(path, what="input file")
    except LadderpackError as exc:
        return "does not exist" if exc.message.startswith("no such") else exc.message
    return None


def _contained_out_dir(mpath: str, root: str, rel: str) -> str:
    """The manifest's output folder, refused unless it lies inside the manifest's folder."""
    out = os.path.normpath(os.path.join(root, rel))
    real_root, real_out = os.path.realpath(root), os.path.realpath(out)
    if os.path.isabs(rel) or os.path.commonpath([real_root, real_out]) != real_root:
        _err(
            mpath,
            f"must be a folder inside the manifest's folder {root}, got {rel!r} (it resolves "
            f"to {real_out}); give --out-dir on the command line to build elsewhere",
            None,
            "project.out_dir",
        )
    return out


def option_objects(
    kind: str,
    source: str,
    options: dict[str, Any],
    *,
    file: str | None = None,
    where: str | None = None,
) -> list[Any]:
    """The option-model objects of an asset.

    ``[StreamOptions, ClipOptions or ToneSpec]`` for streams, ``[WaveTableSpec]``,
    ``[I2cDacTableSpec]`` or ``[CorrectionTableSpec]`` for tables.

    Each takes its own keys of `options`; errors name `file` and `where`.
    """
    from ladderpack import options as model

    groups: list[type]
    if kind == "table":
        groups = [
            {
                "wave": model.WaveTableSpec,
                "i2c-dac": model.I2cDacTableSpec,
            }.get(source, model.CorrectionTableSpec)
        ]
    else:
        groups = [model.StreamOptions, model.ClipOptions if kind == "clip" else model.ToneSpec]
    out: list[Any] = []
    for cls in groups:
        keys = {f.name for f, _i, _h in model.option_fields(cls)}
        values = {k: v for k, v in options.items() if k in keys}
        if cls is model.ToneSpec:
            values["kind"] = source
        try:
            out.append(model.from_mapping(cls, values, file=file, where=where))
        except LadderpackError as exc:
            # the manifest says tone = "sine", not kind: name the key the user wrote
            if exc.field is not None and exc.field.split(".")[-1] == "kind":
                exc = type(exc)(exc.message, file=exc.file, field=exc.field[:-4] + "tone")
            raise exc from None
    return out


def _validated(
    mpath: str, label: str, kind: str, source: str, opts: dict[str, Any]
) -> dict[str, Any]:
    """Check an asset's options through the option model (one line naming the key)."""
    parts = option_objects(kind, source, opts, file=mpath, where=f"asset {label!r}")
    if kind == "tone":
        try:
            parts[0].check_for_tone()
        except LadderpackError as exc:
            _err(mpath, exc.message, label, exc.field)
    return opts


def _sha256(path: str) -> str:
    from ladderpack.reading import sha256_file  # a read error names the file

    return sha256_file(path)


def _rel(p: str, root: str) -> str:
    return os.path.relpath(p, root).replace(os.sep, "/")


def input_stats(spec: AssetSpec, root: str) -> dict[str, list[int]]:
    """(mtime in ns, size) of each input: a touched file counts as changed."""
    out = {}
    for p in spec.inputs:
        st = os.stat(p)
        out[_rel(p, root)] = [st.st_mtime_ns, st.st_size]
    return out


def input_hashes(
    spec: AssetSpec,
    root: str,
    known: dict[str, Any] | None = None,
    stats: dict[str, list[int]] | None = None,
) -> dict[str, str]:
    """SHA-256 of each input, reusing `known` digests for files whose stats are unchanged."""
    known = known or {}
    out = {}
    for p in spec.inputs:
        r = _rel(p, root)
        rec = known.get(r)
        if rec and stats and rec.get("stat") == stats.get(r):
            out[r] = rec["sha256"]
        else:
            out[r] = _sha256(p)
    return out


def _resolved(spec: AssetSpec) -> dict[str, Any]:
    """Every option of an asset as the model resolves it (defaults included)."""
    out: dict[str, Any] = {}
    for obj in option_objects(spec.kind, spec.source, spec.options):
        out.update(obj.to_dict())
    if "levels" in spec.options:
        out["levels"] = spec.options["levels"]
    return out


def fingerprint(spec: AssetSpec, root: str, hashes: dict[str, str] | None = None) -> str:
    """Hash of everything an asset's outputs depend on (no absolute paths, no times)."""
    opts = {k: (_rel(v, root) if k == "levels" and v else v) for k, v in _resolved(spec).items()}
    doc = {
        "tool": __version__,
        "name": spec.name,
        "kind": spec.kind,
        "source": _rel(spec.source, root) if spec.kind == "clip" else spec.source,
        "options": opts,
        "inputs": hashes if hashes is not None else input_hashes(spec, root),
    }
    return hashlib.sha256(json.dumps(doc, sort_keys=True).encode()).hexdigest()


def _in_manifest(exc: LadderpackError, manifest: Manifest, spec: AssetSpec) -> LadderpackError:
    """A plan-time error of an asset, said as parse-time errors are.

    The manifest, the asset and the key; an input file the error names stays in its
    message.
    """
    message = exc.message if exc.file in (None, manifest.path) else f"{exc.file}: {exc.message}"
    where = f"asset {spec.name!r}" + (f".{exc.field}" if exc.field else "")
    return LadderpackError(message, file=manifest.path, field=where)


#: What rendering an asset gives: its files (name -> bytes) and its index entry.
_Rendered = tuple[dict[str, bytes], dict[str, Any]]


def _render(spec: AssetSpec) -> _Rendered:
    """Build one asset in memory: its files and its index entry (runs in a worker)."""
    parts = option_objects(spec.kind, spec.source, spec.options)
    if spec.kind == "table":
        from ladderpack.tables import (
            TableResult,
            correction_table_files,
            i2c_dac_table_files,
            wave_table_files,
        )

        makers: dict[str, Callable[[str, Any], TableResult]] = {
            "wave": wave_table_files,
            "i2c-dac": i2c_dac_table_files,
            "correction": correction_table_files,
        }
        make = makers[spec.source]
        res = make(spec.name, parts[0])
        entry = {
            "name": spec.name,
            "kind": "table",
            "output": "",
            "rate_hz": res.rate_hz,
            "bits": res.bits,
            "samples": res.entries,
            "words": 0,
            "bytes": res.byte_count,
            "data": None,
        }
        return res.files, entry
    from ladderpack.bundle import bundle_files
    from ladderpack.stream import stream_clip, stream_tone

    if spec.kind == "clip":
        asset = stream_clip(spec.source, name=spec.name, options=parts[0], clip=parts[1])
    else:
        asset = stream_tone(spec.source, name=spec.name, tone=parts[1], options=parts[0])
    files = bundle_files(asset)
    comp = asset.compressed
    entry = {
        "name": spec.name,
        "kind": spec.kind,
        "output": str(parts[0].output),
        "rate_hz": float(asset.plan.achieved_rate_hz),
        "bits": asset.packed.layout.bits,
        "samples": asset.sample_count,
        "words": asset.word_count,
        # flash taken: a compressed stream's compressed form, which has no words array
        "bytes": asset.byte_count if comp is None else comp.nbytes,
        "data": f"{spec.name}_words" if comp is None else None,
    }
    return files, entry


def _index_files(entries: list[dict[str, Any]]) -> dict[str, bytes]:
    """assets.h / assets.c / assets.py listing every asset (sorted by name)."""
    rows = sorted(entries, key=lambda e: e["name"])
    h = [
        f"/* Generated by ladderpack {__version__}. Do not edit. */",
        "#ifndef LADDERPACK_ASSETS_H",
        "#define LADDERPACK_ASSETS_H",
        "",
        "#include <stdint.h>",
        "",
        "typedef struct ladderpack_asset {",
        "    const char *name;",
        "    const char *kind;      /* clip, tone or table */",
        '    const char *output;    /* ladder, i2s, pwm or i2c-dac; "" for a table */',
        "    double rate_hz;        /* achieved stream rate (0 for correction tables) */",
        "    unsigned bits;",
        "    unsigned long samples; /* samples or table entries */",
        "    unsigned long words;   /* 32-bit FIFO words (0 for tables) */",
        "    unsigned long bytes;   /* flash taken */",
        "    const uint32_t *words_data; /* the stream's words, or NULL (a table, or a",
        "                                * compressed stream: see its <NAME>_LADDER_INIT) */",
        "} ladderpack_asset_t;",
        "",
        f"#define LADDERPACK_ASSET_COUNT {len(rows)}u",
        "",
        "extern const ladderpack_asset_t ladderpack_assets[LADDERPACK_ASSET_COUNT];",
        "",
        "#endif /* LADDERPACK_ASSETS_H */",
        "",
    ]
    c = [f"/* Generated by ladderpack {__version__}. Do not edit. */", '#include "assets.h"']
    c += [f'#include "{e["name"]}.h"' for e in rows]
    c += ["", "const ladderpack_asset_t ladderpack_assets[LADDERPACK_ASSET_COUNT] = {"]
    for i, e in enumerate(rows):
        data = e["data"] or "0"
        c.append(
            f'    {{"{e["name"]}", "{e["kind"]}", "{e.get("output", "")}", '
            f"{float(e['rate_hz'])!r}, {e['bits']}u, "
            f"{e['samples']}ul, {e['words']}ul, {e['bytes']}ul, {data}}}"
            + ("," if i < len(rows) - 1 else "")
        )
    c += ["};", ""]
    py = [
        f"# Generated by ladderpack {__version__}. Do not edit.",
        "# (name, kind, output, rate_hz, bits, samples, words, bytes)",
        "ASSETS = [",
    ]
    py += [
        f"    ({e['name']!r}, {e['kind']!r}, {e.get('output', '')!r}, "
        f"{float(e['rate_hz'])!r}, {e['bits']}, "
        f"{e['samples']}, {e['words']}, {e['bytes']}),"
        for e in rows
    ]
    py += ["]", ""]
    return {
        f"{INDEX_STEM}.h": "\n".join(h).encode(),
        f"{INDEX_STEM}.c": "\n".join(c).encode(),
        f"{INDEX_STEM}.py": "\n".join(py).encode(),
    }


_HEX64 = re.compile(r"[0-9a-f]{64}")


def _is_count(v: Any) -> bool:
    return isinstance(v, int) and not isinstance(v, bool) and 0 <= v < 2**40


def _valid_record(name: str, rec: Any) -> bool:
    """Whether a state-file record of asset `name` has exactly the shape we write."""
    from ladderpack.emit import valid_digests

    if not isinstance(rec, dict) or not isinstance(rec.get("fingerprint"), str):
        return False
    if not _HEX64.fullmatch(rec["fingerprint"]) or not valid_digests(rec.get("files")):
        return False
    inputs = rec.get("inputs")
    if not isinstance(inputs, dict) or not all(
        isinstance(v, dict)
        and isinstance(v.get("sha256"), str)
        and _HEX64.fullmatch(v["sha256"])
        and isinstance(v.get("stat"), list)
        and len(v["stat"]) == 2
        and all(isinstance(x, int) and not isinstance(x, bool) and x >= 0 for x in v["stat"])
        for v in inputs.values()
    ):
        return False
    e = rec.get("entry")
    return (
        isinstance(e, dict)
        and set(e)
        == {"name", "kind", "output", "rate_hz", "bits", "samples", "words", "bytes", "data"}
        and e["name"] == name
        and (e["output"] == "" or e["output"] in outputs.REGISTRY_BY_NAME)
        and e["kind"] in _KIND_KEYS
        and isinstance(e["rate_hz"], int | float)
        and not isinstance(e["rate_hz"], bool)
        and math.isfinite(e["rate_hz"])
        and e["rate_hz"] >= 0
        and _is_count(e["bits"])
        and 1 <= e["bits"] <= 16
        and all(_is_count(e[k]) for k in ("samples", "words", "bytes"))
        and e["data"] in (None, f"{name}_words")
    )


def _load_state(out_dir: str) -> dict[str, Any]:
    """The state file, with every record that is not exactly of our shape dropped.

    A missing, damaged or edited state file never stops a build: what cannot be
    trusted is rebuilt.
    """
    from ladderpack.emit import valid_digests
    from ladderpack.emit.names import asset_identifier
    from ladderpack.reading import read_json

    path = os.path.join(out_dir, STATE_NAME)
    if not os.path.lexists(path):
        return {}
    try:
        state = read_json(path, what="state file")
    except LadderpackError:
        return {}
    if not isinstance(state, dict) or not isinstance(state.get("assets"), dict):
        return {}
    good = {}
    for name, rec in state["assets"].items():
        try:
            ok = isinstance(name, str) and asset_identifier(name) == name
        except LadderpackError:
            ok = False
        if ok and _valid_record(name, rec):
            good[name] = rec
    index = state.get("index")
    return {
        "tool": state.get("tool"),
        "assets": good,
        "index": index if valid_digests(index) else {},
    }


def _write_changed(
    files: dict[str, bytes], out_dir: str, *, touch: bool = False, untouched: tuple[str, ...] = ()
) -> None:
    """Write only the files whose bytes differ, atomically, in order (sidecar last).

    With `touch`, files that are already right (but those in `untouched`) get a new
    modification time, so a rebuilt asset's outputs are newer than its inputs for Make
    and Ninja.
    """
    from ladderpack.emit import write_files

    changed = {}
    same = []
    for name, data in files.items():
        path = os.path.join(out_dir, name)
        try:
            with open(path, "rb") as fh:
                if fh.read() == data:
                    if name not in untouched:
                        same.append(path)
                    continue
        except OSError:
            pass
        changed[name] = data
    if changed:
        write_files(changed, out_dir)
    if touch:
        for path in same:
            os.utime(path)


def _files_match(out_dir: str, files: dict[str, bytes]) -> str | None:
    """None when every file in `out_dir` holds exactly these bytes, else what differs."""
    for name, data in sorted(files.items()):
        path = os.path.join(out_dir, name)
        if not os.path.exists(path):
            return f"{name} is missing"
        with open(path, "rb") as fh:
            if fh.read() != data:
                return f"{name} differs from what its inputs give"
    return None


def _outputs_ok(out_dir: str, recorded: dict[str, str], *, verify: bool) -> str | None:
    for name, digest in recorded.items():
        path = os.path.join(out_dir, name)
        if not os.path.exists(path):
            return f"{name} is missing"
        if verify and _sha256(path) != digest:
            return f"{name} was edited by hand"
    return None


#: Characters a Make depfile cannot carry in a file name (GNU make has no escape for them).
_MAKE_REFUSED = frozenset("\n\r\t\\") | frozenset(chr(c) for c in range(32))


def make_escape(path: str, *, target: bool = False) -> str:
    r"""Escape a file name for a Make rule (GNU make syntax), or refuse it.

    Space, ``#`` and ``:`` get a backslash, ``$`` is doubled.  Newline,
    carriage return, tab, backslash and other control characters cannot be
    written safely (a newline would start a recipe line) and are refused.  A
    ``%`` is literal in a prerequisite but would turn a target into a pattern
    rule, so it is refused in targets (`target`).

    Raises
    ------
    LadderpackError
        For a name holding a character that cannot be escaped.

    Examples
    --------
    >>> make_escape("clips/door chime #2: 50%.flac")
    'clips/door\\ chime\\ \\#2\\:\\ 50%.flac'
    """
    refused = _MAKE_REFUSED | ({"%"} if target else set())
    bad = sorted({repr(ch) for ch in path if ch in refused})
    if bad:
        raise LadderpackError(
            f"this file name holds {', '.join(bad)}, which a Make depfile cannot carry; "
            "rename the file or build without --depfile",
            file=path,
            field="depfile",
        )
    out = path.replace("$", "$$")
    for ch in " #:":
        out = out.replace(ch, "\\" + ch)
    return out


def build(
    manifest: Manifest,
    *,
    jobs: int = 1,
    only: list[str] | None = None,
    check: bool = False,
    depfile: str | None = None,
    echo: Callable[[str], None] = print,
    progress: Callable[[int, int], None] | None = None,
) -> BuildResult:
    """Build (or, with `check`, verify) every asset of a manifest.

    Parameters
    ----------
    manifest : Manifest
        From :func:`load_manifest`.
    jobs : int
        Assets built in parallel (processes).
    only : list of str, optional
        Build just these assets (the index and depfile still cover all).
    check : bool
        Build nothing; report every asset whose outputs are missing, stale or
        edited by hand.
    depfile : str, optional
        Write a Make-format dependency file naming every input of every output.
    echo : callable
        Receives one line per asset and the budget line.
    progress : callable, optional
        Called with (assets made, assets to make) as each asset to build is made.

    Raises
    ------
    LadderpackError
        Before anything is written: for assets whose C symbols clash, input
        names a depfile cannot carry, or files in the way that ladderpack did
        not write.
    """
    from ladderpack.emit import LockUnavailableError, folder_lock

    if depfile:
        _check_depfile_names(manifest, depfile)
    run = functools.partial(_build_locked, manifest, jobs=jobs, only=only, check=check, echo=echo)
    if check and not os.path.isdir(manifest.out_dir):  # nothing to lock, nothing to create
        return run(depfile=None, progress=None)
    try:
        with folder_lock(manifest.out_dir, on_wait=echo):
            return run(depfile=depfile, progress=progress)
    except LockUnavailableError:
        if not check:
            raise
        # a check only reads: on a read-only checkout (CI caches, mounted sources) it goes
        # on without the lock, which it could not create
        return run(depfile=None, progress=None)


def _check_depfile_names(manifest: Manifest, depfile: str) -> None:
    """Refuse, before building, any name the depfile could not carry safely."""
    cwd = os.getcwd()
    paths = [os.path.abspath(manifest.path)]
    paths += [p for spec in manifest.assets for p in spec.inputs]
    for p in paths:
        make_escape(os.path.relpath(p, cwd).replace(os.sep, "/"))
    make_escape(os.path.relpath(manifest.out_dir, cwd).replace(os.sep, "/"), target=True)
    dep = os.path.abspath(depfile)
    if os.path.dirname(dep) == os.path.abspath(manifest.out_dir):
        from ladderpack.emit import BOOK_NAMES

        taken = {f"{a.name}{ext}" for a in manifest.assets for ext in _OUTPUT_EXTS}
        taken |= {f"{INDEX_STEM}.{e}" for e in ("h", "c", "py")} | set(PLAYER_FILES)
        if os.path.basename(dep) in taken | {STATE_NAME, *BOOK_NAMES}:
            raise LadderpackError(
                "the depfile would replace one of the build's own outputs; name it otherwise",
                file=depfile,
                field="depfile",
            )


#: Extensions of the files an asset can have.
_OUTPUT_EXTS = (".bin", ".h", ".c", ".py", ".pio", ".json")


def _symbol_clashes(
    manifest: Manifest, rendered: dict[str, dict[str, bytes]], index: dict[str, bytes]
) -> None:
    """Refuse assets whose C macros or arrays would clash once the index includes them all."""
    from ladderpack._version import __version__ as version
    from ladderpack.emit import templates
    from ladderpack.emit.names import c_symbols

    owner: dict[str, str] = {}
    sources = [
        ("the shared player", templates.render("ladderpack_player.h", VERSION=version)),
        ("the index", index[f"{INDEX_STEM}.h"].decode()),
    ]
    for spec in manifest.assets:
        files = rendered.get(spec.name)
        if files is not None:
            header = files[f"{spec.name}.h"].decode()
        else:
            try:
                with open(os.path.join(manifest.out_dir, f"{spec.name}.h"), encoding="utf-8") as fh:
                    header = fh.read()
            except (OSError, UnicodeDecodeError):
                header = ""
        sources.append((f"asset {spec.name!r}", header))
    for who, text in sources:
        for sym in sorted(c_symbols(text)):
            if sym in owner and owner[sym] != who:
                raise LadderpackError(
                    f"{owner[sym]} and {who} would both define the C symbol {sym}; "
                    "rename one of them",
                    file=manifest.path,
                    field="name",
                )
            owner[sym] = who


class _LazyPool:
    """A process pool started by its first task (a build with nothing to make starts none)."""

    def __init__(self, jobs: int) -> None:
        self.jobs = jobs
        self._pool: Any = None  # a concurrent.futures.ProcessPoolExecutor once started

    def submit(self, fn: Callable[[AssetSpec], _Rendered], spec: AssetSpec) -> Future[_Rendered]:
        if self._pool is None:
            from concurrent.futures import ProcessPoolExecutor

            self._pool = ProcessPoolExecutor(max_workers=self.jobs)
        return self._pool.submit(fn, spec)

    def close(self) -> None:
        if self._pool is not None:
            self._pool.shutdown(wait=True, cancel_futures=True)
            self._pool = None


def _build_locked(
    manifest: Manifest,
    *,
    jobs: int,
    only: list[str] | None,
    check: bool,
    depfile: str | None,
    echo: Callable[[str], None],
    progress: Callable[[int, int], None] | None,
) -> BuildResult:
    pool = _LazyPool(jobs if not check else 1)
    try:
        return _build_with(
            manifest,
            pool=pool,
            only=only,
            check=check,
            depfile=depfile,
            echo=echo,
            progress=progress,
        )
    finally:
        pool.close()


def _build_with(
    manifest: Manifest,
    *,
    pool: _LazyPool,
    only: list[str] | None,
    check: bool,
    depfile: str | None,
    echo: Callable[[str], None],
    progress: Callable[[int, int], None] | None,
) -> BuildResult:
    from ladderpack.emit import pending_journal

    out = manifest.out_dir
    state = _load_state(out)
    old = state.get("assets", {}) if state.get("tool") == __version__ else {}
    names = {a.name for a in manifest.assets}
    if only:
        unknown = sorted(set(only) - names)
        if unknown:
            raise LadderpackError(
                f"no asset named {', '.join(unknown)}", file=manifest.path, field="only"
            )
    result = BuildResult()
    check_entries: dict[str, Any] = {}
    todo: list[tuple[AssetSpec, str, dict[str, Any]]] = []
    lines: dict[str, str] = {}
    futures: list[Future[_Rendered]] = []
    for spec in manifest.assets:
        rec = old.get(spec.name)
        stats = input_stats(spec, manifest.root)
        hashes = input_hashes(spec, manifest.root, (rec or {}).get("inputs"), stats)
        fp = fingerprint(spec, manifest.root, hashes)
        inputs = {r: {"sha256": hashes[r], "stat": stats[r]} for r in hashes}
        why = None
        if rec is None and check:
            # No record (a fresh clone of a project that commits its generated files, say):
            # decide by content, rendering the asset in memory and comparing bytes.
            try:
                files, entry = _render(spec)
            except LadderpackError as exc:
                raise _in_manifest(exc, manifest, spec) from None
            why = _files_match(out, files)
            check_entries[spec.name] = entry
        elif rec is None:
            why = "never built"
        elif rec.get("fingerprint") != fp:
            why = "inputs or options changed"
        elif not check and any(
            (rec.get("inputs", {}).get(r) or {}).get("stat") != stats[r] for r in stats
        ):
            # A build remakes a touched input's outputs so that make, which goes by file
            # times, sees them newer; --check goes by content (the fingerprint holds the
            # inputs' SHA-256), so a checkout's new file times do not make it stale.
            why = "an input was touched"
        else:
            why = _outputs_ok(out, rec.get("files", {}), verify=True)
            check_entries[spec.name] = rec.get("entry")
        if why is None:
            result.up_to_date.append(spec.name)
            lines[spec.name] = f"{spec.name}: up to date"
        elif check:
            result.problems.append((spec.name, why))
            lines[spec.name] = f"{spec.name}: STALE ({why})"
        elif only and spec.name not in only:
            result.up_to_date.append(spec.name)
            lines[spec.name] = f"{spec.name}: skipped (not in --only)"
        else:
            todo.append((spec, fp, inputs))
            if pool.jobs > 1:
                # Rendering starts at once, so the workers import and render while this
                # process goes on hashing the next assets' inputs.
                futures.append(pool.submit(_render, spec))
    if check:
        if pending_journal(out):
            result.problems.append(("folder", "a replace was interrupted"))
            echo("folder: STALE (a replace was interrupted and left a mixed set; run build)")
        for spec in manifest.assets:
            if spec.name in lines and "STALE" in lines[spec.name]:
                echo(lines[spec.name])
        index_rec = state.get("index", {})
        if index_rec:
            why = _outputs_ok(out, index_rec, verify=True)
        elif all(check_entries.get(a.name) for a in manifest.assets):
            # no record of the index either: compare it by content too
            why = _files_match(out, _index_files([check_entries[a.name] for a in manifest.assets]))
        else:
            why = "index missing"
        if why:
            result.problems.append(("index", why))
            echo(f"index: STALE ({why})")
        return result

    new_assets = dict(old)
    rendered: list[tuple[dict[str, bytes], dict[str, Any]]] = []
    specs = [s for s, _, _ in todo]
    try:
        for k, spec in enumerate(specs):
            rendered.append(futures[k].result() if futures else _render(spec))
            if progress is not None:
                progress(len(rendered), len(specs))
    except LadderpackError as exc:  # the asset being made when it failed
        raise _in_manifest(exc, manifest, specs[len(rendered)]) from None
    for (spec, fp, inputs), (files, entry) in zip(todo, rendered, strict=True):
        new_assets[spec.name] = {
            "fingerprint": fp,
            "inputs": inputs,
            "files": {
                n: hashlib.sha256(d).hexdigest()
                for n, d in sorted(files.items())
                if n not in PLAYER_FILES
            },
            "entry": entry,
        }
    new_assets = {k: v for k, v in new_assets.items() if k in names}
    entries = [new_assets[a.name]["entry"] for a in manifest.assets if a.name in new_assets]
    index = _index_files(entries)
    # Every check before the first write: the set of assets must compile together.
    _symbol_clashes(
        manifest,
        {s.name: files for (s, _, _), (files, _) in zip(todo, rendered, strict=True)},
        index,
    )
    # The flash budget of the whole set, before anything is written.
    total = sum(int(e["bytes"]) for e in entries)
    avail = manifest.flash_bytes - manifest.flash_reserve_bytes
    if total > avail and not manifest.over_flash_ok:
        raise LadderpackError(
            f"the assets need {total} bytes of flash together but {avail} are available "
            f"({manifest.flash_bytes} less {manifest.flash_reserve_bytes} reserved, "
            f"{100 * total / max(avail, 1):.1f} %); shorten or drop assets, raise "
            'flash_bytes, or set over_flash = "warn" in [project]',
            file=manifest.path,
            field="flash_bytes",
        )
    # One replace for the whole build: every changed output, the index and the state, so
    # the folder's record is read and written once however many assets there are (a
    # build is linear in its size) and the set is whole, old or new, if it is cut short.
    outputs: dict[str, bytes] = {}
    for (spec, _fp, _inputs), (files, entry) in zip(todo, rendered, strict=True):
        outputs.update(files)
        result.built.append(spec.name)
        lines[spec.name] = f"{spec.name}: built ({entry['bytes']} bytes)"
    outputs.update(index)
    result.total_bytes = sum(int(e["bytes"]) for e in entries)
    new_state = {
        "tool": __version__,
        "assets": {k: new_assets[k] for k in sorted(new_assets)},
        "index": {n: hashlib.sha256(d).hexdigest() for n, d in sorted(index.items())},
    }
    outputs[STATE_NAME] = (json.dumps(new_state, indent=1, sort_keys=True) + "\n").encode()
    _write_changed(outputs, out, touch=True, untouched=(STATE_NAME,))
    for spec in manifest.assets:
        echo(lines[spec.name])
    echo(
        f"flash: {result.total_bytes} of {avail} bytes available "
        f"({100 * result.total_bytes / max(avail, 1):.1f} %) for {len(entries)} asset(s)"
        + ('; OVER the flash (over_flash = "warn")' if result.total_bytes > avail else "")
    )
    if depfile:
        _write_depfile(manifest, new_assets, index, depfile)
    return result


def _write_depfile(
    manifest: Manifest, assets: dict[str, Any], index: dict[str, bytes], depfile: str
) -> None:
    cwd = os.getcwd()

    def rel(p: str, target: bool = False) -> str:
        return make_escape(os.path.relpath(p, cwd).replace(os.sep, "/"), target=target)

    lines = []
    mf = rel(os.path.abspath(manifest.path))
    all_inputs: list[str] = [mf]
    for spec in manifest.assets:
        deps = [mf, *(rel(p) for p in spec.inputs)]
        all_inputs += deps[1:]
        for name in sorted(assets.get(spec.name, {}).get("files", {})):
            out = rel(os.path.join(manifest.out_dir, name), target=True)
            lines.append(f"{out}: {' '.join(deps)}")
    for name in sorted(index):
        out = rel(os.path.join(manifest.out_dir, name), target=True)
        lines.append(f"{out}: {' '.join(sorted(set(all_inputs)))}")
    text = "\n".join(lines) + "\n"
    from ladderpack.emit import write_files

    folder = os.path.dirname(os.path.abspath(depfile))
    target = os.path.join(folder, os.path.basename(depfile))
    try:
        with open(target, encoding="utf-8") as fh:
            if fh.read() == text:
                return
    except OSError:
        pass
    write_files({os.path.basename(depfile): text.encode()}, folder)
