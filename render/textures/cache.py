"""Disk cache of texture sets: PNG files keyed by a hash of what determines their content.

``texture_set(family, params, seed, cache_dir)`` returns the paths of four
files under ``cache_dir/<family>/<key[:2]>/``:

- ``<key>_base_color.png`` — 8-bit sRGB RGB (Mitsuba ``bitmap``, ``raw=False``);
- ``<key>_roughness.png`` — 8-bit grey, roughness · 255 (``raw=True``);
- ``<key>_normal.png`` — 8-bit RGB, 255 · (n + 1) / 2 (``raw=True``, under ``normalmap``);
- ``<key>_info.json`` — family, canonical parameters, seed, resolution,
  generator version, material kind and the snapped geometry.

The key hashes (family, canonical parameters, seed, resolution, generator
version), so a changed generator never serves stale files. Each file is
written to a temporary name in the same folder and moved into place with
``os.replace``, which is atomic on one file system: concurrent workers on
one machine, or sharing a cache folder, either find no file or a complete
one, never a partial one. Two workers that miss at the same time both
generate; their outputs are byte-identical, so whichever lands last wins
without harm. The info file is written last and marks a complete set.
"""

from __future__ import annotations

import hashlib
import json
import os
from collections.abc import Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from ..images import write_atomic, write_image
from .maps import TextureMaps, encode_normal8, encode_roughness8
from .registry import DEFAULT_RESOLUTION_PX, FAMILIES, canonical_params, check_request, generate_texture


@dataclass(frozen=True)
class TextureSetPaths:
    """Paths of one cached texture set (see the module docstring for the encodings)."""

    key: str
    base_color: Path
    roughness: Path
    normal: Path
    info: Path

    def all(self) -> tuple[Path, Path, Path, Path]:
        return (self.base_color, self.roughness, self.normal, self.info)


def texture_key(
    family: str, params: Mapping[str, Any] | None, seed: int, *, resolution_px: int = DEFAULT_RESOLUTION_PX
) -> str:
    """Hex SHA-256 (first 32 digits) of family, canonical parameters, seed, resolution and generator version."""
    canonical = canonical_params(family, params)
    check_request(seed, resolution_px)
    record = {
        "family": family,
        "params": canonical,
        "seed": int(seed),
        "resolution_px": int(resolution_px),
        "version": FAMILIES[family].version,
    }
    text = json.dumps(record, sort_keys=True, separators=(",", ":"))
    return hashlib.sha256(text.encode()).hexdigest()[:32]


def paths_for(cache_dir: str | os.PathLike[str], family: str, key: str) -> TextureSetPaths:
    """Where the set with ``key`` lives (whether or not it exists yet)."""
    folder = Path(cache_dir) / family / key[:2]
    return TextureSetPaths(
        key,
        folder / f"{key}_base_color.png",
        folder / f"{key}_roughness.png",
        folder / f"{key}_normal.png",
        folder / f"{key}_info.json",
    )


def write_texture_set(maps: TextureMaps, paths: TextureSetPaths) -> None:
    """Encode and write one set; the info file goes last so its presence marks a complete set."""
    paths.base_color.parent.mkdir(parents=True, exist_ok=True)
    write_image(paths.base_color, maps.base_color_srgb8)
    write_image(paths.roughness, encode_roughness8(maps.roughness))
    write_image(paths.normal, encode_normal8(maps.normal))
    write_atomic(paths.info, (json.dumps(maps.info, sort_keys=True, indent=1) + "\n").encode())


def texture_set(
    family: str,
    params: Mapping[str, Any] | None,
    seed: int,
    cache_dir: str | os.PathLike[str],
    *,
    resolution_px: int = DEFAULT_RESOLUTION_PX,
) -> TextureSetPaths:
    """Paths of the cached PNG set for (family, params, seed, resolution), generating it on a miss.

    A hit (all four files present) reads nothing and generates nothing.
    """
    key = texture_key(family, params, seed, resolution_px=resolution_px)
    paths = paths_for(cache_dir, family, key)
    if all(path.is_file() for path in paths.all()):
        return paths
    maps = generate_texture(family, params, seed, resolution_px=resolution_px)
    write_texture_set(maps, paths)
    return paths
