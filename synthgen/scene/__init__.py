"""One image's scene: kinds of shape, backgrounds, placement, clutter, occlusion, visible boxes, facts, degradation.

The stage between the resolved config and the writers: :func:`render_scene` (image ``k`` of a
config) and :func:`compose` (from a generator) return a :class:`Scene`, an image with its
objects' exact boxes, categories, masks and facts.  The public names are importable from
the package itself and load on first use, so importing :mod:`synthgen.scene.facts` stays light.
"""

from synthgen._lazy import lazy_exports

#: public name -> module of this package that defines it
_EXPORTS = {
    "IgnoreRegions": "synthgen.scene.annotate",
    "Scene": "synthgen.scene.annotate",
    "category_id": "synthgen.scene.kinds",
    "LUMA": "synthgen.scene.raster",
    "image_rng": "synthgen.seeding",
    "place_occluder": "synthgen.scene.occluders",
    **{
        name: "synthgen.scene.composer"
        for name in ("compose", "compose_shapes", "luminance", "plan_objects", "render_scene")
    },
}

__all__ = sorted(_EXPORTS)


__getattr__, __dir__ = lazy_exports(__name__, _EXPORTS)
