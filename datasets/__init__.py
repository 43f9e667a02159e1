"""Dataset export: a campaign's done frames as a COCO (and optionally YOLO) dataset with checksums and splits.

What an export folder holds (all paths relative to it; ``<stem>`` is the frame index, zero-padded)::

    README.md                   what is where (generated)
    images/<stem>.png           RGB frames (sRGB, 8 bit)
    masks/<stem>.png            16-bit instance-id masks (0 = background; ids = annotations' instance_id)
    annotations/<split>.json    COCO instances files (images with camera, annotations with RLE + extra fields)
    labels/<stem>.txt           YOLO labels (``--format yolo|both``), plus data.yaml, classes.txt, <split>.txt
    scenes.jsonl                one line per frame: its full scene spec and render facts
    campaign.json               settings, randomization budget, quotas, costs
    software.json               package versions of the exporting machine, renderer variants of the frames
    class_statistics.json       per class and split: instances, visibility, area; quota counters
    splits.json                 ratios, method, achieved shares and every layout's split
    manifest.jsonl              header line, then one line per file: path, size, SHA-256 (written last)

Design rules:

* **Streaming, memory bounded.** Frames and instances are read with ``.iterator(chunk_size=…)`` as two
  streams sorted by frame index and merged; per-split COCO ``images`` and ``annotations`` arrays go to
  scratch part files that are concatenated into the final JSON at the end. Nothing per-instance is kept in
  memory; per-layout data (the split assignment: a few integers per layout) is.
* **Nothing half-written.** A directory export is built in a sibling staging folder and swapped in by
  two renames at the very end; on any error the staging folder is removed and the previous export stays.
* **Re-export writes only what is new.** The previous export's manifest records, per frame file, the
  source file's size and mtime and the exported file's size and mtime. An unchanged frame file is hard
  linked from the previous export into the staging folder (no data written) and keeps its checksum; a
  generated per-frame file (YOLO label) is linked when its new content has the previous checksum. The
  previous manifest is read as a stream in frame order (merge join), so this too is memory bounded.
* **Splits** are assigned per layout (frames sharing ``Frame.layout_index`` share the room and its
  furniture, so they never straddle splits) by a seeded greedy balance of per-class instance counts; a
  re-export with the same ratios keeps every layout's previous split, so a grown dataset never moves an
  old training scene into validation or test.
* Exported files contain no export timestamp (only the manifest header does), so re-exporting an
  unchanged campaign yields byte-identical files.

Modules, in the direction they import (each imports only modules above it):

* ``errors`` (``ExportError``), ``splits`` (the split balance; pure), ``json_text`` (the two JSON spellings);
* ``options`` (``ExportOptions`` and the parsing of its text forms), ``permissions`` (``can_export``);
* ``queries`` (the database reads: campaign, categories, per-layout counts, the frame and instance streams);
* ``manifest`` (manifest format, reading a previous one, file hashing), ``sinks`` (where files go: a staging
  directory with reuse, or a streamed zip);
* ``coco``, ``yolo``, ``metadata`` (the files of each format and the describing files);
* ``writer`` (one export run, its entry points ``export_dataset`` / ``stream_dataset_zip``, the folder lock
  and swap) and ``verify`` (``verify_dataset``);
* ``views``, ``urls``, ``templatetags.export_tags`` and the commands ``export_dataset``, ``verify_dataset``,
  ``bench_export``.

References
----------
COCO data format, "Object detection" and RLE segmentation (cocodataset.org/#format-data);
YOLO text label format ``class cx cy w h`` normalised to [0, 1] (Ultralytics documentation, "Dataset
formats / detect", from memory); PKWARE APPNOTE.TXT (ZIP64 and data descriptors for streamed zips).
"""
