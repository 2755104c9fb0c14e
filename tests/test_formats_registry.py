"""The format registry: one entry per output format, and the directory layout agrees with it."""

from __future__ import annotations

from synthgen.formats import dataset_dir, registry
from synthgen.formats.export import FORMATS, parse_formats


def test_registry_names_are_the_accepted_formats():
    """--formats accepts exactly the registry's names, in its order."""
    assert FORMATS == tuple(registry.REGISTRY) == ("coco", "voc", "yolo", "tokens", "masks")
    assert parse_formats("masks,coco") == ("masks", "coco")


def test_overwrite_removes_exactly_what_the_formats_and_splits_own():
    """FORMAT_ENTRIES (what --overwrite removes beside the run's own files) = what formats own + the split files."""
    owned = set(registry.owned_entries()) - {dataset_dir.ANNOTATIONS}
    splits = {dataset_dir.split_annotations_name("*"), dataset_dir.SPLITS}
    assert set(dataset_dir.FORMAT_ENTRIES) == owned | splits


def test_every_format_writes_what_it_owns(tmp_path):
    """Each registry writer puts its files under the names its entry owns, and nothing else."""
    import fnmatch

    from tests._formats_helpers import build_coco

    coco = build_coco([(40, 30, [((3, 2, 7, 5), 1)]), (40, 30, [((0, 0, 40, 30), 2)])])
    for name, fmt in registry.REGISTRY.items():
        out = tmp_path / name
        out.mkdir()
        job = registry.WriteJob(coco, out, out / "images")
        assert fmt.write(job) == 2
        made = sorted(p.name for p in out.iterdir())
        assert made and all(any(fnmatch.fnmatchcase(m, pat) for pat in fmt.owns) for m in made), (name, made)


def test_check_walks_the_registry_and_a_new_entry_is_checked(tmp_path, monkeypatch):
    """synthgen check asks every registry entry's check rule, in order, and names each looked_for when none is found."""
    import pytest

    from synthgen.errors import InputFileError
    from synthgen.formats.check import check_dataset

    def check_parts_list(ctx):
        listing = ctx.root / "parts.lst"
        if not listing.is_file():
            return False
        ctx.count("parts", 1, 1, 0)
        ctx.add(listing, "line 1", "must name a part", "")
        return True

    with pytest.raises(InputFileError) as err:
        check_dataset(tmp_path)
    assert str(err.value).endswith("holds no dataset format synthgen knows (annotations.json, voc/, yolo/, tokens.jsonl, masks/)")
    extra = registry.Format("parts", ("parts.lst",), lambda job: 0, check_parts_list, "parts.lst")
    table = {**registry.REGISTRY, "parts": extra}
    monkeypatch.setattr(registry, "REGISTRY", table)
    monkeypatch.setattr("synthgen.formats.check.REGISTRY", table)
    with pytest.raises(InputFileError) as err:
        check_dataset(tmp_path)
    assert str(err.value).endswith(", masks/, parts.lst)")  # the built-in names, then the new entry's
    (tmp_path / "parts.lst").write_text("\n")
    report = check_dataset(tmp_path)
    assert report.formats == ("parts",)
    assert [str(p) for p in report.problems] == ["parts.lst: line 1: must name a part (got '')"]
    assert all(callable(f.check) and f.looked_for for f in registry.REGISTRY.values())
