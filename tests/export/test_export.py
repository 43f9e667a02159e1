"""Export of real rendered frames: COCO checked with pycocotools, YOLO, manifest, re-export, bad input."""

from __future__ import annotations

import copy
import io
import json
import os
from collections import Counter
from importlib import metadata
from pathlib import Path

import numpy as np
import pytest
from django.conf import settings
from django.core.management import CommandError, call_command
from pycocotools import mask as mask_utils
from pycocotools.coco import COCO
from pycocotools.cocoeval import COCOeval

from datasets.manifest import MANIFEST_NAME
from datasets.options import ExportOptions
from datasets.splits import SPLITS
from datasets.verify import verify_dataset
from datasets.writer import ExportSummary, export_dataset
from tests.export.conftest import FRAME_PLAN

pytestmark = [pytest.mark.django_db, pytest.mark.filterwarnings("ignore::DeprecationWarning:pycocotools.*")]


def _export(campaign, out: Path, **options) -> ExportSummary:
    return export_dataset(campaign_id=campaign.pk, out_dir=out, options=ExportOptions(**options))


def _coco_files(out: Path) -> list[Path]:
    return [
        out / "annotations" / f"{split}.json" for split in SPLITS if (out / "annotations" / f"{split}.json").exists()
    ]


def _quiet_eval(gt: COCO, dt: COCO, iou_type: str) -> float:
    evaluation = COCOeval(gt, dt, iou_type)
    evaluation.evaluate()
    evaluation.accumulate()
    evaluation.summarize()
    return float(evaluation.stats[0])


def test_coco_loads_and_ground_truth_as_detections_scores_ap_one(real_campaign, tmp_path, capsys):
    out = tmp_path / "dataset"
    summary = _export(real_campaign, out)
    assert summary.frames == len(FRAME_PLAN)
    total_annotations = 0
    for path in _coco_files(out):
        gt = COCO(str(path))  # pycocotools: the file loads as a COCO instances file
        total_annotations += len(gt.getAnnIds())
        if not gt.getAnnIds():
            continue
        annotations = gt.loadAnns(gt.getAnnIds())
        for iou_type in ("bbox", "segm"):
            detections = [
                {
                    "image_id": a["image_id"],
                    "category_id": a["category_id"],
                    "score": 1.0,
                    **({"bbox": a["bbox"]} if iou_type == "bbox" else {"segmentation": a["segmentation"]}),
                }
                for a in annotations
            ]
            # pycocotools COCOeval: the ground truth used as detections must score AP = 1.0.
            assert _quiet_eval(gt, gt.loadRes(detections), iou_type) == pytest.approx(1.0), (path.name, iou_type)
    assert total_annotations == sum(summary.annotations_per_split.values()) > 10
    capsys.readouterr()


def test_masks_areas_and_boxes_agree_with_pycocotools(real_campaign, tmp_path):
    import cv2

    out = tmp_path / "dataset"
    _export(real_campaign, out)
    checked = 0
    for path in _coco_files(out):
        data = json.loads(path.read_text())
        images = {image["id"]: image for image in data["images"]}
        masks = {
            i: cv2.imread(str(out / "masks" / image["mask_file_name"]), cv2.IMREAD_UNCHANGED)
            for i, image in images.items()
        }
        for annotation in data["annotations"]:
            rle = annotation["segmentation"]
            decoded = mask_utils.decode(rle)  # pycocotools decodes our RLE ...
            assert int(decoded.sum()) == annotation["area"]  # ... to our area
            assert mask_utils.toBbox(rle).tolist() == annotation["bbox"]  # and our box is toBbox's
            assert int(mask_utils.area(rle)) == annotation["area"]
            # The exported 16-bit mask image holds the same pixels under the annotation's instance id.
            instance_mask = masks[annotation["image_id"]] == annotation["instance_id"]
            assert masks[annotation["image_id"]].dtype == np.uint16
            assert np.array_equal(instance_mask, decoded.astype(bool))
            assert annotation["iscrowd"] == (0 if annotation["accepted"] else 1)  # rejected: ignore regions
            for key in ("visible_fraction", "occlusion_fraction", "truncation_fraction"):
                assert 0.0 <= annotation[key] <= 1.0
            assert len(annotation["amodal_bbox"]) == 4
            checked += 1
        for image in data["images"]:
            K, R = np.array(image["camera"]["K"]), np.array(image["camera"]["R"])
            assert K.shape == (3, 3) and K[0, 2] == image["width"] / 2 and K[1, 2] == image["height"] / 2
            assert np.allclose(R @ R.T, np.eye(3), atol=1e-5)  # a rotation
            assert len(image["camera"]["t"]) == 3 and image["exposure"]["shutter_s"] > 0
    assert checked > 10


def test_every_frame_parameter_and_campaign_facts_are_exported(real_campaign, tmp_path):
    from render.spec import spec_from_json

    out = tmp_path / "dataset"
    _export(real_campaign, out)
    lines = (out / "scenes.jsonl").read_text().splitlines()
    assert len(lines) == len(FRAME_PLAN)
    for line, (index, layout, view, composition) in zip(lines, FRAME_PLAN, strict=True):
        row = json.loads(line)
        assert (row["frame_index"], row["layout_index"], row["view_index"]) == (index, layout, view)
        assert row["composition"] == dict(sorted(composition.items()))
        frame_dir = Path(settings.MEDIA_ROOT) / real_campaign.frames.get(index=index).output_dir
        on_disk = spec_from_json((frame_dir / "scene.json").read_text())
        assert row["scene"] == on_disk
    campaign_json = json.loads((out / "campaign.json").read_text())
    assert campaign_json["budget"] == real_campaign.budget and campaign_json["seed"] == real_campaign.seed
    assert {q["class_name"] for q in campaign_json["quotas"]} == set(
        real_campaign.quotas.values_list("object_class__name", flat=True)
    )
    software = json.loads((out / "software.json").read_text())
    assert software["packages"]["mitsuba"] == metadata.version("mitsuba")
    assert software["packages"]["drjit"] == metadata.version("drjit")
    assert software["packages"]["Django"] == metadata.version("Django")
    assert sum(software["renderer_variants"].values()) == len(FRAME_PLAN)
    assert set(software["renderer_variants"]) <= {"scalar_rgb", "llvm_ad_rgb"}
    stats = json.loads((out / "class_statistics.json").read_text())
    coco_total = sum(len(json.loads(p.read_text())["annotations"]) for p in _coco_files(out))
    assert sum(c["exported_instances"]["total"] + c["ignore_regions"]["total"] for c in stats["classes"]) == coco_total


def test_frames_of_a_layout_share_a_split(real_campaign, tmp_path):
    out = tmp_path / "dataset"
    _export(real_campaign, out, ratios=(0.5, 0.25, 0.25))
    split_of_layout: dict[int, set[str]] = {}
    for line in (out / "scenes.jsonl").read_text().splitlines():
        row = json.loads(line)
        split_of_layout.setdefault(row["layout_index"], set()).add(row["split"])
    assert all(len(splits) == 1 for splits in split_of_layout.values())
    splits = json.loads((out / "splits.json").read_text())
    assigned = {layout: split for split, layouts in splits["assignment"].items() for layout in layouts}
    assert {layout: next(iter(s)) for layout, s in split_of_layout.items()} == assigned


def test_manifest_verifies_and_names_every_altered_missing_or_added_file(real_campaign, tmp_path, capsys):
    out = tmp_path / "dataset"
    _export(real_campaign, out, formats=frozenset({"coco", "yolo"}))
    call_command("verify_dataset", str(out))
    assert "OK" in capsys.readouterr().out
    manifest = [json.loads(line) for line in (out / MANIFEST_NAME).read_text().splitlines()[1:]]
    listed = {e["path"] for e in manifest}
    on_disk = {str(p.relative_to(out)) for p in out.rglob("*") if p.is_file()} - {MANIFEST_NAME}
    assert listed == on_disk  # every file, and only those
    for entry in manifest[:5]:
        assert (out / entry["path"]).stat().st_size == entry["size"] and len(entry["sha256"]) == 64

    image = out / "images" / "000003.png"
    data = bytearray(image.read_bytes())
    data[len(data) // 2] ^= 0x01  # one flipped bit, same size
    image.write_bytes(bytes(data))
    (out / "labels" / "000001.txt").unlink()
    (out / "annotations" / "train.json").write_text("{}")
    (out / "stray.txt").write_text("not part of the dataset")
    with pytest.raises(CommandError):
        call_command("verify_dataset", str(out))
    errors = capsys.readouterr().err
    assert "altered: images/000003.png (SHA-256 differs" in errors
    assert "missing: labels/000001.txt" in errors
    assert "altered: annotations/train.json (size" in errors
    assert "unexpected: stray.txt" in errors


def test_yolo_labels_match_the_coco_boxes(real_campaign, tmp_path):
    import yaml

    out = tmp_path / "dataset"
    _export(real_campaign, out, formats=frozenset({"coco", "yolo"}))
    data = yaml.safe_load((out / "data.yaml").read_text())
    categories = json.loads((out / "annotations" / "train.json").read_text())["categories"]
    assert data["names"] == {c["id"] - 1: c["name"] for c in categories} and data["nc"] == len(categories)
    assert (out / "classes.txt").read_text().split() == [c["name"] for c in categories]
    for split in SPLITS:
        listed = (out / data[split]).read_text().split()
        coco = json.loads((out / "annotations" / f"{split}.json").read_text())
        assert sorted(listed) == sorted(f"./images/{i['file_name']}" for i in coco["images"])
        by_image: dict[int, list] = {}
        for a in coco["annotations"]:
            by_image.setdefault(a["image_id"], []).append(a)
        assert all((out / path).is_file() for path in listed)  # "./images/…" relative to data.yaml's folder
        for image in coco["images"]:
            rows = [
                line.split() for line in (out / "labels" / f"{image['file_name'][:-4]}.txt").read_text().splitlines()
            ]
            expected = [a for a in by_image.get(image["id"], []) if not a["iscrowd"]]  # ignore regions: no line
            assert len(rows) == len(expected)
            for row, a in zip(rows, expected, strict=True):
                x, y, w, h = a["bbox"]
                cls, cx, cy, nw, nh = int(row[0]), *map(float, row[1:])
                assert cls == a["category_id"] - 1
                assert (cx, cy, nw, nh) == pytest.approx(
                    (
                        (x + w / 2) / image["width"],
                        (y + h / 2) / image["height"],
                        w / image["width"],
                        h / image["height"],
                    ),
                    abs=1e-6,
                )


def _annotations(out: Path) -> list[dict]:
    return [a for p in _coco_files(out) for a in json.loads(p.read_text())["annotations"]]


def test_rejected_instances_are_ignore_regions_labels_or_left_out_as_asked(real_campaign, tmp_path):
    from campaigns.models import Instance

    visible = Instance.objects.filter(campaign=real_campaign, mask_area_px__gt=0)
    rejected = visible.filter(accepted=False)
    background = rejected.filter(mask_area_px__lt=16)
    assert rejected.exclude(pk__in=background).exists()  # the fixture holds ignore regions to export
    exports = {mode: tmp_path / mode for mode in ("ignore", "label", "drop")}
    summaries = {mode: _export(real_campaign, out, rejected=mode) for mode, out in exports.items()}
    # label: every visible instance is an object (what the export did before ignore regions).
    assert len(_annotations(exports["label"])) == visible.count()
    assert not any(a["iscrowd"] for a in _annotations(exports["label"]))
    # drop: accepted objects only; the rejected are counted, not hidden.
    assert [a["iscrowd"] for a in _annotations(exports["drop"])] == [0] * visible.filter(accepted=True).count()
    assert summaries["drop"].dropped == rejected.count()
    assert any("left out as asked" in line for line in summaries["drop"].lines())
    # ignore (default): accepted objects, and every rejected one with 16 visible pixels or more as iscrowd 1.
    ignore = _annotations(exports["ignore"])
    assert sorted(a["id"] for a in ignore if a["iscrowd"]) == sorted(
        rejected.exclude(pk__in=background).values_list("pk", flat=True)
    )
    assert all(a["accepted"] == (a["iscrowd"] == 0) for a in ignore)
    assert summaries["ignore"].ignore_regions == rejected.count() - background.count()
    assert summaries["ignore"].background == background.count()
    readme = (exports["ignore"] / "README.md").read_text()
    assert "`iscrowd: 1`" in readme and "This export: `ignore`" in readme
    # Frames stay in every mode: a frame without a labelled object is a negative example.
    for out in exports.values():
        images = sum(len(json.loads(p.read_text())["images"]) for p in _coco_files(out))
        assert images == len(FRAME_PLAN)


def test_accepted_only_is_rejected_drop(real_campaign, tmp_path):
    """The download's ``accepted_only=1`` and the command's ``--accepted-only``, from before ignore regions."""
    out = tmp_path / "accepted"
    call_command("export_dataset", str(real_campaign.pk), "--out", str(out), "--accepted-only", stdout=io.StringIO())
    assert json.loads((out / "manifest.jsonl").read_text().splitlines()[0])["options"]["rejected"] == "drop"
    assert all(a["accepted"] and not a["iscrowd"] for a in _annotations(out))


def test_background_limit_per_class_turns_ignore_regions_into_background(real_campaign, tmp_path):
    from campaigns.models import Instance

    rejected = Instance.objects.filter(campaign=real_campaign, mask_area_px__gt=0, accepted=False)
    biggest = rejected.order_by("-mask_area_px").select_related("object_class").first()
    name = biggest.object_class.name
    out = tmp_path / "dataset"
    summary = _export(
        real_campaign, out, background_below_px=0, background_below_px_by_class=((name, biggest.mask_area_px + 1),)
    )
    crowd = {a["id"] for a in _annotations(out) if a["iscrowd"]}
    of_class = rejected.filter(object_class__name=name)
    assert crowd == set(rejected.exclude(object_class__name=name).values_list("pk", flat=True))
    assert summary.background == of_class.count() and summary.ignore_regions == len(crowd)
    stats = json.loads((out / "class_statistics.json").read_text())
    limits = {c["name"]: c["background_below_px"] for c in stats["classes"]}
    assert limits[name] == biggest.mask_area_px + 1 and {v for k, v in limits.items() if k != name} == {0}


def test_ignore_regions_are_not_false_positives_in_cocoeval(real_campaign, tmp_path):
    """pycocotools COCOeval treats iscrowd-1 ground truth as ignore: detections on it are neither true nor false
    positives, and it is never a missed object (COCO detection evaluation; ``COCOeval.evaluateImg``)."""
    out = tmp_path / "dataset"
    _export(real_campaign, out)
    crowd_seen = 0
    for path in _coco_files(out):
        gt = COCO(str(path))
        annotations = gt.loadAnns(gt.getAnnIds())
        objects = [a for a in annotations if not a["iscrowd"]]
        crowd = [a for a in annotations if a["iscrowd"]]
        if not objects or not crowd:
            continue
        crowd_seen += len(crowd)
        detections = [
            {"image_id": a["image_id"], "category_id": a["category_id"], "score": 1.0, "bbox": a["bbox"]}
            for a in objects
        ]
        assert _quiet_eval(gt, gt.loadRes(copy.deepcopy(detections)), "bbox") == pytest.approx(1.0)
        # A confident detection exactly on each ignore region changes nothing ...
        on_ignore = [
            {"image_id": a["image_id"], "category_id": a["category_id"], "score": 0.99, "bbox": a["bbox"]}
            for a in crowd
        ]
        assert _quiet_eval(gt, gt.loadRes(copy.deepcopy(detections + on_ignore)), "bbox") == pytest.approx(1.0)
        # ... while the same regions exported as objects (iscrowd 0) and not detected lower the recall.
        as_objects = json.loads(path.read_text())
        for a in as_objects["annotations"]:
            a["iscrowd"] = 0
        plain = tmp_path / f"plain-{path.name}"
        plain.write_text(json.dumps(as_objects))
        gt_plain = COCO(str(plain))
        assert _quiet_eval(gt_plain, gt_plain.loadRes(copy.deepcopy(detections)), "bbox") < 1.0
    assert crowd_seen > 0


def _read_rgb(path: Path) -> np.ndarray:
    import cv2

    return cv2.cvtColor(cv2.imread(str(path), cv2.IMREAD_COLOR), cv2.COLOR_BGR2RGB)


def test_yolo_fill_paints_ignore_regions_and_never_a_labelled_object(real_campaign, media_root, tmp_path):
    import cv2

    from datasets.writer import IGNORE_FILL_RGB

    out = tmp_path / "dataset"
    summary = _export(real_campaign, out, formats=frozenset({"coco", "yolo"}))
    crowd_by_image: dict[int, list[int]] = {}
    objects_by_image: dict[int, list[int]] = {}
    for a in _annotations(out):
        (crowd_by_image if a["iscrowd"] else objects_by_image).setdefault(a["image_id"], []).append(a["instance_id"])
    assert summary.yolo_filled_frames == len(crowd_by_image) > 0
    for frame in real_campaign.frames.all():
        stem = f"{frame.index:06d}"
        exported = _read_rgb(out / "images" / f"{stem}.png")
        original = _read_rgb(media_root / frame.output_dir / "rgb.png")
        ids = cv2.imread(str(out / "masks" / f"{stem}.png"), cv2.IMREAD_UNCHANGED)
        crowd = np.isin(ids, crowd_by_image.get(frame.index, []))
        labelled = np.isin(ids, objects_by_image.get(frame.index, []))
        assert (exported[crowd] == IGNORE_FILL_RGB).all()  # every ignore-region pixel is filled
        assert np.array_equal(exported[labelled], original[labelled])  # no labelled pixel is touched
        changed = (exported != original).any(axis=2)
        grown = cv2.dilate(crowd.astype(np.uint8), np.ones((3, 3), np.uint8)).astype(bool)
        assert not (changed & ~grown).any()  # nothing outside the region and its one-pixel rim changes


def test_yolo_skip_and_keep(real_campaign, tmp_path):
    skip, keep = tmp_path / "skip", tmp_path / "keep"
    yolo_and_coco = frozenset({"coco", "yolo"})
    summary_skip = _export(real_campaign, skip, formats=yolo_and_coco, yolo_ignore="skip")
    summary_keep = _export(real_campaign, keep, formats=yolo_and_coco, yolo_ignore="keep")
    crowd = Counter(a["image_id"] for a in _annotations(skip) if a["iscrowd"])
    listed = {
        line
        for split in SPLITS
        if (skip / f"{split}.txt").exists()
        for line in (skip / f"{split}.txt").read_text().split()
    }
    assert listed == {f"./images/{i:06d}.png" for i in range(len(FRAME_PLAN)) if i not in crowd}
    assert summary_skip.yolo_skipped_frames == len(crowd) > 0
    unlabelled = dict(line.split() for line in (keep / "yolo_unlabelled.txt").read_text().splitlines())
    assert unlabelled == {f"./images/{i:06d}.png": str(n) for i, n in crowd.items()}
    assert summary_keep.yolo_unlabelled == sum(crowd.values())
    for frame_index in crowd:  # kept images are the render's own
        assert (keep / "images" / f"{frame_index:06d}.png").read_bytes() == (
            skip / "images" / f"{frame_index:06d}.png"
        ).read_bytes()


@pytest.mark.parametrize(
    ("text", "expected"),
    [
        ("", (16, ())),
        ("0", (0, ())),
        ("20, wall_clock=40,chair=0", (20, (("chair", 0), ("wall_clock", 40)))),
    ],
)
def test_parse_background_below(text, expected):
    from datasets.options import parse_background_below

    assert parse_background_below(text) == expected


@pytest.mark.parametrize("text", ["-1", "x", "chair=", "=5", "chair=1.5", "99999999999"])
def test_parse_background_below_refuses_bad_input(text):
    from datasets.errors import ExportError
    from datasets.options import parse_background_below

    with pytest.raises(ExportError, match="background below"):
        parse_background_below(text)


def test_unknown_modes_are_refused():
    from datasets.errors import ExportError

    with pytest.raises(ExportError, match="rejected instances"):
        ExportOptions(rejected="hide")
    with pytest.raises(ExportError, match="YOLO ignore regions"):
        ExportOptions(yolo_ignore="blur")


def test_annotations_carry_contrast_and_the_statistics_average_it(real_campaign, tmp_path):
    from campaigns.models import ClassQuota, Instance

    visible = Instance.objects.filter(campaign=real_campaign, mask_area_px__gt=0)
    chairs = visible.filter(object_class__name="chair")
    old = chairs.order_by("pk").first()
    Instance.objects.filter(pk=old.pk).update(contrast=None)  # as recorded from a frame rendered before the measure
    ClassQuota.objects.filter(campaign=real_campaign, object_class__name="chair").update(min_contrast=3.5)
    out = tmp_path / "dataset"
    _export(real_campaign, out)
    annotations = {a["id"]: a for p in _coco_files(out) for a in json.loads(p.read_text())["annotations"]}
    rows = {row.pk: row for row in visible}
    assert set(annotations) == set(rows)
    assert all(annotations[pk]["contrast"] == row.contrast for pk, row in rows.items())
    assert annotations[old.pk]["contrast"] is None
    assert sum(a["contrast"] is not None for a in annotations.values()) == len(rows) - 1  # the render core measured
    assert '"contrast":null' in "".join(p.read_text() for p in _coco_files(out))  # JSON null, not a missing key
    stats = {c["name"]: c for c in json.loads((out / "class_statistics.json").read_text())["classes"]}
    measured = [r.contrast for r in chairs.exclude(pk=old.pk)]
    assert stats["chair"]["instances_with_contrast"] == len(measured) == chairs.count() - 1
    assert stats["chair"]["mean_contrast"] == pytest.approx(sum(measured) / len(measured), abs=1e-6)
    assert stats["chair"]["quota"]["min_contrast"] == 3.5 and stats["sofa"]["quota"]["min_contrast"] == 2.0
    quotas = {q["class_name"]: q for q in json.loads((out / "campaign.json").read_text())["quotas"]}
    assert quotas["chair"]["min_contrast"] == 3.5
    assert "contrast" in (out / "README.md").read_text()


def test_reexport_writes_only_what_is_new(real_campaign, rendered_frames, media_root, tmp_path):
    from tests.export.conftest import record_frames

    out = tmp_path / "dataset"
    first = _export(real_campaign, out, formats=frozenset({"coco", "yolo"}))
    per_frame_files = 3  # image, mask, YOLO label
    assert first.files_reused == 0 and first.files_written == first.files
    inode = (out / "images" / "000000.png").stat().st_ino
    before = {e["path"]: e for e in map(json.loads, (out / MANIFEST_NAME).read_text().splitlines()[1:])}
    splits_before = json.loads((out / "splits.json").read_text())["assignment"]

    again = _export(real_campaign, out, formats=frozenset({"coco", "yolo"}))
    assert again.files_reused == per_frame_files * len(FRAME_PLAN)
    assert again.files_written == again.files - again.files_reused  # only the aggregate files
    assert (out / "images" / "000000.png").stat().st_ino == inode  # linked, not rewritten
    after = {e["path"]: e for e in map(json.loads, (out / MANIFEST_NAME).read_text().splitlines()[1:])}
    assert {p: e["sha256"] for p, e in after.items()} == {p: e["sha256"] for p, e in before.items()}

    # The campaign grows by one layout of two frames (re-rendering frames 6 and 7 under new indices 8 and 9
    # would change their seeds, so the same files are recorded as a new layout).
    grown_plan = [(8, 4, 0, FRAME_PLAN[6][3]), (9, 4, 1, FRAME_PLAN[7][3])]
    record_frames(real_campaign, {8: rendered_frames[6], 9: rendered_frames[7]}, grown_plan, media_root)
    grown = _export(real_campaign, out, formats=frozenset({"coco", "yolo"}))
    assert grown.frames == len(FRAME_PLAN) + 2
    assert grown.files_reused == per_frame_files * len(FRAME_PLAN)
    frame_files_written = grown.files_written - (grown.files - grown.files_reused - per_frame_files * 2)
    assert frame_files_written == per_frame_files * 2
    splits_after = json.loads((out / "splits.json").read_text())["assignment"]
    old_split = {layout: s for s, layouts in splits_before.items() for layout in layouts}
    new_split = {layout: s for s, layouts in splits_after.items() for layout in layouts}
    assert {layout: new_split[layout] for layout in old_split} == old_split  # old layouts keep their split
    assert verify_dataset(directory=out).ok

    # A changed source frame is copied again.
    os.utime(media_root / f"campaigns/{real_campaign.pk}/frames/0/rgb.png", ns=(1, 1))
    changed = _export(real_campaign, out, formats=frozenset({"coco", "yolo"}))
    assert changed.files_reused == per_frame_files * (len(FRAME_PLAN) + 2) - 1


def test_reexport_of_an_unchanged_campaign_gives_identical_files(real_campaign, tmp_path):
    one, two = tmp_path / "one", tmp_path / "two"
    _export(real_campaign, one, formats=frozenset({"coco", "yolo"}))
    _export(real_campaign, two, formats=frozenset({"coco", "yolo"}))
    lines_one = (one / MANIFEST_NAME).read_text().splitlines()[1:]
    lines_two = (two / MANIFEST_NAME).read_text().splitlines()[1:]
    strip = [{k: v for k, v in json.loads(line).items() if k in ("path", "size", "sha256")} for line in lines_one]
    assert strip == [
        {k: v for k, v in json.loads(line).items() if k in ("path", "size", "sha256")} for line in lines_two
    ]  # deterministic: same content, same order, same checksums


@pytest.mark.parametrize("splits", ["0.5,0.5", "0.8,0.1,0.2", "a,b,c", "-0.1,0.6,0.5", "0,0.5,0.5", "nan,0,1"])
def test_bad_split_ratios_fail_with_one_line_and_write_nothing(real_campaign, tmp_path, splits):
    exports = tmp_path / "exports"
    exports.mkdir()
    out = exports / "dataset"
    with pytest.raises(CommandError, match=r"^splits: ") as info:
        call_command("export_dataset", str(real_campaign.pk), "--out", str(out), f"--splits={splits}")
    assert "\n" not in str(info.value)
    assert not out.exists() and list(exports.iterdir()) == []


def test_bad_campaign_format_and_out_dir(real_campaign, tmp_path):
    tmp_path = tmp_path / "exports"
    tmp_path.mkdir()
    with pytest.raises(CommandError, match="no campaign with id or name 'nope'"):
        call_command("export_dataset", "nope", "--out", str(tmp_path / "x"))
    with pytest.raises(CommandError, match="format: expected coco, yolo or both"):
        call_command("export_dataset", str(real_campaign.pk), "--out", str(tmp_path / "x"), "--format", "voc")
    a_file = tmp_path / "a-file"
    a_file.write_text("x")
    with pytest.raises(CommandError, match="cannot create"):
        call_command("export_dataset", str(real_campaign.pk), "--out", str(a_file / "dataset"))
    with pytest.raises(CommandError, match="exists and is not a directory"):
        call_command("export_dataset", str(real_campaign.pk), "--out", str(a_file))
    foreign = tmp_path / "photos"
    foreign.mkdir()
    (foreign / "holiday.jpg").write_text("precious")
    with pytest.raises(CommandError, match="not an Evenframe export"):
        call_command("export_dataset", str(real_campaign.pk), "--out", str(foreign))
    assert (foreign / "holiday.jpg").read_text() == "precious"
    assert not (tmp_path / "x").exists()
    assert sorted(p.name for p in tmp_path.iterdir()) == ["a-file", "photos"]  # no staging or lock left


def test_a_failure_midway_leaves_the_previous_export_untouched(real_campaign, media_root, tmp_path):
    tmp_path = tmp_path / "exports"
    tmp_path.mkdir()
    out = tmp_path / "dataset"
    _export(real_campaign, out)
    manifest_before = (out / MANIFEST_NAME).read_bytes()
    (media_root / f"campaigns/{real_campaign.pk}/frames/5/instances.png").unlink()
    with pytest.raises(CommandError, match=r"missing frame file .*frames/5/instances.png"):
        call_command("export_dataset", str(real_campaign.pk), "--out", str(out))
    assert (out / MANIFEST_NAME).read_bytes() == manifest_before
    assert verify_dataset(directory=out).ok
    assert sorted(p.name for p in tmp_path.iterdir()) == ["dataset"]
    fresh = tmp_path / "fresh"
    with pytest.raises(CommandError):
        call_command("export_dataset", str(real_campaign.pk), "--out", str(fresh))
    assert not fresh.exists()


def test_command_output_and_empty_campaign(make_campaign, media_root, tmp_path, capsys):
    campaign = make_campaign(name="nothing rendered yet")
    out = tmp_path / "empty"
    call_command("export_dataset", campaign.name, "--out", str(out), "--format", "both")
    text = capsys.readouterr().out
    assert f"exported campaign {campaign.pk}: 0 frames in 0 layouts" in text and "frames/s" in text
    gt = COCO(str(out / "annotations" / "train.json"))
    assert gt.getImgIds() == [] and len(gt.getCatIds()) == 6
    assert verify_dataset(directory=out).ok


def test_instances_recorded_without_rle_get_one_from_the_mask_image(real_campaign, tmp_path):
    from campaigns.models import Instance

    Instance.objects.filter(campaign=real_campaign).update(segmentation_rle=None)
    out = tmp_path / "dataset"
    _export(real_campaign, out)
    import cv2

    checked = 0
    for path in _coco_files(out):
        for a in json.loads(path.read_text())["annotations"]:
            ids = cv2.imread(str(out / "masks" / f"{a['image_id']:06d}.png"), cv2.IMREAD_UNCHANGED)
            assert np.array_equal(mask_utils.decode(a["segmentation"]).astype(bool), ids == a["instance_id"])
            assert int(mask_utils.area(a["segmentation"])) == a["area"]  # pycocotools
            checked += 1
    assert checked > 10


def test_dataset_statistics_agree_with_a_recount_of_the_annotations(real_campaign, tmp_path):
    """``dataset_statistics.json`` counts the labelled objects (iscrowd 0) exactly as the COCO files hold them; size
    classes by the COCO detection evaluation's area limits 32² and 96² px (from memory: cocodataset.org, detection
    evaluation)."""
    out = tmp_path / "dataset"
    _export(real_campaign, out)
    stats = json.loads((out / "dataset_statistics.json").read_text())
    images: dict[int, list[dict]] = {}
    for path in _coco_files(out):
        data = json.loads(path.read_text())
        names = {c["id"]: c["name"] for c in data["categories"]}
        for image in data["images"]:
            images.setdefault(image["id"], [])
        for a in data["annotations"]:
            if not a["iscrowd"]:
                images[a["image_id"]].append({**a, "name": names[a["category_id"]]})
    objects = [a for rows in images.values() for a in rows]
    assert stats["images"] == len(images) == len(FRAME_PLAN) and stats["instances"] == len(objects)
    for name, counts in stats["size_classes"]["counts"].items():
        areas = [a["area"] for a in objects if a["name"] == name]
        expected = [
            sum(area < 32**2 for area in areas),
            sum(32**2 <= area < 96**2 for area in areas),
            sum(area >= 96**2 for area in areas),
        ]
        assert counts == expected, name
    per_image = Counter(len(rows) for rows in images.values())
    recount = [per_image.get(n, 0) for n in stats["instances_per_image"]["values"]]
    assert stats["instances_per_image"]["counts"] == recount
    classes = stats["co_occurrence"]["classes"]
    for i, first in enumerate(classes):
        for j, second in enumerate(classes):
            both = sum(
                any(a["name"] == first for a in rows) and any(a["name"] == second for a in rows)
                for rows in images.values()
            )
            assert stats["co_occurrence"]["counts"][i][j] == both
    distances = stats["camera_distance"]["counts"]
    assert sum(sum(row) for row in distances.values()) == len(objects)  # every object's distance is known


def test_excluded_frames_are_in_no_file_and_listed_in_the_manifest(real_campaign, tmp_path):
    from campaigns import services
    from campaigns.models import Frame

    left_out = Frame.objects.get(campaign=real_campaign, index=3)
    services.exclude_frames(campaign_id=real_campaign.pk, frame_ids=[left_out.pk], reason="lamp blown out")
    out = tmp_path / "dataset"
    summary = _export(real_campaign, out, formats=frozenset({"coco", "yolo"}))
    stem = "000003"
    assert summary.frames == len(FRAME_PLAN) - 1
    assert not (out / "images" / f"{stem}.png").exists() and not (out / "masks" / f"{stem}.png").exists()
    assert not (out / "labels" / f"{stem}.txt").exists()
    for path in _coco_files(out):
        data = json.loads(path.read_text())
        assert 3 not in {i["id"] for i in data["images"]} and 3 not in {a["image_id"] for a in data["annotations"]}
    for split in SPLITS:
        if (out / f"{split}.txt").exists():
            assert f"./images/{stem}.png" not in (out / f"{split}.txt").read_text().split()
    scenes = [json.loads(line)["frame_index"] for line in (out / "scenes.jsonl").read_text().splitlines()]
    assert 3 not in scenes and len(scenes) == len(FRAME_PLAN) - 1
    header = json.loads((out / MANIFEST_NAME).read_text().splitlines()[0])
    assert header["excluded_frames"] == [{"frame_index": 3, "reason": "lamp blown out"}]
    assert not any(stem in line for line in (out / MANIFEST_NAME).read_text().splitlines()[1:])
    assert verify_dataset(directory=out).ok
    stats = json.loads((out / "dataset_statistics.json").read_text())
    assert stats["images"] == len(FRAME_PLAN) - 1
