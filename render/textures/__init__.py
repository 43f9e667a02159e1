"""Procedural, seamlessly tiling textures with a physical size: base colour, roughness and normal maps.

Thirteen families (:data:`FAMILIES`): wood, parquet, ceramic_tile,
stone_tile, marble, concrete, carpet, rug, fabric, leather, plaster,
wallpaper, brushed_metal. Each is generated with numpy and scipy from a seed
and parameters in real units; the square image covers ``tile_size_m`` metres
and wraps around seamlessly (every field is periodic by construction).

In memory::

    maps = generate_texture("parquet", {"board_width_m": 0.09}, seed=3, resolution_px=512)
    maps.base_color_srgb8   # (512, 512, 3) uint8, sRGB-encoded
    maps.roughness          # (512, 512) float32 in [0, 1] (GGX alpha = roughness²)
    maps.normal             # (512, 512, 3) float32 unit vectors, tangent space (x = +u, y = +v, z out)
    maps.info               # family, canonical params, seed, resolution, version, material kind, geometry

On disk (cached, safe for concurrent workers)::

    paths = texture_set("parquet", params, seed, cache_dir, resolution_px=512)
    paths.base_color, paths.roughness, paths.normal, paths.info

Sampling for randomization::

    families_for_slot("floor")                       # ("parquet", "ceramic_tile", ...)
    params = sample_texture_params("parquet", rng)   # every parameter inside its documented range

Encodings and axes: :mod:`.maps`; parameters, units and sources: :mod:`.registry`.
"""

from .cache import TextureSetPaths, texture_key, texture_set
from .maps import TextureMaps, decode_normal8, encode_normal8, encode_roughness8, srgb8_to_linear
from .registry import (
    DEFAULT_RESOLUTION_PX,
    FAMILIES,
    SLOT_KINDS,
    Choice,
    ParamRange,
    TextureFamily,
    TextureParamError,
    canonical_params,
    families_for_slot,
    generate_texture,
    sample_texture_params,
)

__all__ = [
    "DEFAULT_RESOLUTION_PX",
    "FAMILIES",
    "SLOT_KINDS",
    "Choice",
    "ParamRange",
    "TextureFamily",
    "TextureMaps",
    "TextureParamError",
    "TextureSetPaths",
    "canonical_params",
    "decode_normal8",
    "encode_normal8",
    "encode_roughness8",
    "families_for_slot",
    "generate_texture",
    "sample_texture_params",
    "srgb8_to_linear",
    "texture_key",
    "texture_set",
]
