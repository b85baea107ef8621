"""RO-Crate 1.1 archive of photos and their evidence (issue 9).

Kinds of test (STYLE.md §6):

* *Published specification*: the required entities and properties of
  "RO-Crate Metadata Specification 1.1" (https://w3id.org/ro/crate/1.1),
  sections "Root Data Entity" and "Data Entities", checked by hand.
* *Reference library as oracle*: the ``rocrate`` package (ro-crate-py 0.16,
  test-only dependency) must read our zip and see the root dataset and every
  file entity.
* *Synthetic data with a known answer*: hashes and sizes are recomputed with
  ``hashlib`` from the zip's own members.
"""

from __future__ import annotations

import hashlib
import json
import zipfile
from pathlib import Path

import pytest

from tubevision.errors import TubevisionInputError
from tubevision.record.crate import archive_inputs, write_crate

from ._records import PHOTO_BYTES, make_record, write_output_folder


@pytest.fixture
def bench(tmp_path: Path) -> Path:
    """A bench folder: photos/, and out/ with two photos' output folders."""
    (tmp_path / "photos").mkdir()
    (tmp_path / "photos" / "bench-k7.jpg").write_bytes(PHOTO_BYTES)
    (tmp_path / "photos" / "bench k9 (step 2).jpg").write_bytes(PHOTO_BYTES[::-1])
    write_output_folder(tmp_path / "out" / "bench-k7")
    rec2 = make_record(image={"file": "bench k9 (step 2).jpg",
                              "sha256": hashlib.sha256(PHOTO_BYTES[::-1]).hexdigest(),
                              "width": 4032, "height": 3024, "captured_at": None})
    write_output_folder(tmp_path / "out" / "bench k9 (step 2)", rec2)
    (tmp_path / "out" / "bench-k7" / ".record.json.abc.tmp").write_bytes(b"half-written")
    return tmp_path


def _crate(bench: Path) -> tuple[Path, dict, zipfile.ZipFile]:
    files, base = archive_inputs([bench / "photos", bench / "out"])
    zp = write_crate(bench / "evidence.zip", files, base=base, date_published="2026-05-04")
    zf = zipfile.ZipFile(zp)
    return zp, json.loads(zf.read("ro-crate-metadata.json")), zf


def test_metadata_has_the_required_root_entities(bench):
    """RO-Crate 1.1, "Root Data Entity": descriptor and root dataset with their required keys."""
    _, meta, _ = _crate(bench)
    assert meta["@context"] == "https://w3id.org/ro/crate/1.1/context"
    by_id = {e["@id"]: e for e in meta["@graph"]}
    desc = by_id["ro-crate-metadata.json"]
    assert desc["@type"] == "CreativeWork"
    assert desc["about"] == {"@id": "./"}
    assert desc["conformsTo"] == {"@id": "https://w3id.org/ro/crate/1.1"}
    root = by_id["./"]
    assert root["@type"] == "Dataset"
    for key in ("name", "description", "datePublished", "license"):
        assert root[key], key
    assert root["datePublished"] == "2026-05-04"
    assert root["license"]["@id"] in by_id  # the licence is described as a contextual entity


def test_every_file_is_listed_with_correct_hash_size_and_type(bench):
    _, meta, zf = _crate(bench)
    members = [i.filename for i in zf.infolist() if not i.is_dir() and i.filename != "ro-crate-metadata.json"]
    assert len(members) == 2 + 2 * 5  # two photos, two folders of five files; no hidden temporaries
    files = {e["@id"]: e for e in meta["@graph"] if e.get("@type") == "File"}
    root = next(e for e in meta["@graph"] if e["@id"] == "./")
    assert {p["@id"] for p in root["hasPart"]} == set(files)
    from urllib.parse import unquote

    assert sorted(unquote(i) for i in files) == sorted(members)
    want_types = {".jpg": "image/jpeg", ".png": "image/png", ".json": "application/json",
                  ".html": "text/html", ".csv": "text/csv", ".sha256": "text/plain"}
    for eid, ent in files.items():
        data = zf.read(unquote(eid))
        assert ent["sha256"] == hashlib.sha256(data).hexdigest(), eid
        assert int(ent["contentSize"]) == len(data)
        assert ent["encodingFormat"] == want_types[Path(unquote(eid)).suffix]
    assert "photos/bench%20k9%20%28step%202%29.jpg" in files  # RFC 3986 escaping of the @id
    assert zf.read("photos/bench-k7.jpg") == PHOTO_BYTES


def test_runs_link_each_record_to_its_photo(bench):
    """RO-Crate 1.1, "Provenance of entities": a CreateAction per run, object = photo."""
    _, meta, _ = _crate(bench)
    by_id = {e["@id"]: e for e in meta["@graph"]}
    actions = [e for e in meta["@graph"] if e.get("@type") == "CreateAction"]
    assert len(actions) == 2
    objects = sorted(a["object"][0]["@id"] for a in actions)
    assert objects == ["photos/bench%20k9%20%28step%202%29.jpg", "photos/bench-k7.jpg"]
    for a in actions:
        assert a["instrument"] == {"@id": "#tubevision"} and by_id["#tubevision"]["@type"] == "SoftwareApplication"
        results = {r["@id"].rsplit("/", 1)[-1] for r in a["result"]}
        assert {"record.json", "report.html", "annotated.png", "tubes.csv"} <= results
    assert by_id["out/bench-k7/record.json"]["about"] == {"@id": "photos/bench-k7.jpg"}


def test_rocrate_library_reads_the_archive(bench, tmp_path):
    """Oracle: ro-crate-py reads the zip and finds the root dataset and every file."""
    rocrate_model = pytest.importorskip("rocrate.rocrate", reason="rocrate (test-only oracle) not installed")
    zp, meta, _ = _crate(bench)
    crate = rocrate_model.ROCrate(zp)
    assert crate.name == "tubevision evidence"
    assert crate.root_dataset["datePublished"] == "2026-05-04"
    ids = {e.id for e in crate.data_entities}
    ours = {e["@id"] for e in meta["@graph"] if e.get("@type") == "File"}
    assert ours <= ids


def test_existing_archive_is_not_overwritten_unless_asked(bench):
    zp, _, _ = _crate(bench)
    before = zp.read_bytes()
    files, base = archive_inputs([bench / "photos"])
    with pytest.raises(TubevisionInputError, match="already exists"):
        write_crate(zp, files, base=base)
    assert zp.read_bytes() == before
    write_crate(zp, files, base=base, overwrite=True)
    assert len(zipfile.ZipFile(zp).namelist()) == 3


def test_archive_inside_an_archived_folder_leaves_itself_out(bench):
    zp = bench / "out" / "evidence.zip"
    write_crate(zp, *archive_inputs([bench / "out"], exclude=zp)[:1])
    files, base = archive_inputs([bench / "out"], exclude=zp)
    assert zp.resolve() not in files
    write_crate(zp, files, base=base, overwrite=True)
    assert "out/evidence.zip" not in zipfile.ZipFile(zp).namelist()
    with pytest.raises(TubevisionInputError, match="cannot contain itself"):
        write_crate(zp, archive_inputs([bench / "out"])[0], overwrite=True)


def test_default_base_is_the_common_folder(bench):
    zp = write_crate(bench / "one.zip", [bench / "out" / "bench-k7" / "record.json",
                                         bench / "photos" / "bench-k7.jpg"])
    names = zipfile.ZipFile(zp).namelist()
    assert sorted(names) == ["out/bench-k7/record.json", "photos/bench-k7.jpg", "ro-crate-metadata.json"]


def test_bad_input_is_refused_with_a_message(bench):
    photo = bench / "photos" / "bench-k7.jpg"
    with pytest.raises(TubevisionInputError, match="must end in .zip"):
        write_crate(bench / "evidence.tar", [photo])
    with pytest.raises(TubevisionInputError, match="no such file"):
        write_crate(bench / "e.zip", [bench / "nope.jpg"])
    with pytest.raises(TubevisionInputError, match="listed twice"):
        write_crate(bench / "e.zip", [photo, photo])
    with pytest.raises(TubevisionInputError, match="not inside the archive's base folder"):
        write_crate(bench / "e.zip", [photo], base=bench / "out")
    (bench / "ro-crate-metadata.json").write_text("{}")
    with pytest.raises(TubevisionInputError, match="reserved"):
        write_crate(bench / "e.zip", [bench / "ro-crate-metadata.json", photo])
    with pytest.raises(TubevisionInputError, match="no such file or folder"):
        archive_inputs([bench / "missing"])
    (bench / "empty").mkdir()
    with pytest.raises(TubevisionInputError, match="hold no files"):
        archive_inputs([bench / "empty"])
    assert not (bench / "e.zip").exists()
