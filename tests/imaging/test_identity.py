"""Identifier policy: no direct identifier leaves imaging; keyed pseudonyms; the site key file.

Outside sources: DICOM PS3.15 Annex E Table E.1-1 (the direct identifiers, partly from memory),
pydicom's data dictionary (PS3.6 keywords), RFC 2104 HMAC-SHA256 computed by the standard library.
"""

from __future__ import annotations

import dataclasses
import hashlib
import hmac
import json
import stat
from pathlib import Path
from typing import Any

import numpy as np
import pytest
from pydicom.datadict import tag_for_keyword

from casefile.errors import InputError
from casefile.imaging import ANNEX_E_IDENTIFIERS, SAFE_ATTRIBUTES, load, load_site_key
from casefile.imaging.identity import ANNEX_E_UIDS, DIRECT_IDENTIFIERS

from .synth import write_dicom

# Synthetic identity values (made up here; no real person)
NAME, PID, BIRTH, INSTITUTION = "Quill^Marigold", "ZX-449-17", "19610704", "Northfield Test Infirmary"
PHYSICIAN, ACCESSION = "Brandt^Otto", "ACC7731"


def identified(tmp_path: Path, **extra: Any) -> Path:
    attrs = dict(PatientName=NAME, PatientID=PID, PatientBirthDate=BIRTH, InstitutionName=INSTITUTION,
                 ReferringPhysicianName=PHYSICIAN, AccessionNumber=ACCESSION, OtherPatientIDs="ZX-1",
                 Manufacturer="Acme Imaging", BodyPartExamined="CHEST")
    attrs.update(extra)
    return write_dicom(tmp_path / "case.dcm", np.arange(256, dtype=np.uint16).reshape(16, 16), **attrs)


def all_strings(value: Any) -> list[str]:
    """Every string reachable in a value: dataclass fields, dicts (keys too), sequences, arrays."""
    if dataclasses.is_dataclass(value) and not isinstance(value, type):
        return [s for f in dataclasses.fields(value) for s in all_strings(getattr(value, f.name))]
    if isinstance(value, dict):
        return [s for k, v in value.items() for s in all_strings(k) + all_strings(v)]
    if isinstance(value, (list, tuple)):
        return [s for v in value for s in all_strings(v)]
    if isinstance(value, np.ndarray):
        return [value.tobytes().decode("latin-1")]
    return [str(value)]


def test_annex_e_keywords_are_real_and_disjoint_from_the_allow_list() -> None:
    # pydicom's data dictionary (PS3.6) knows every keyword we list; none allowed is an Annex E attribute
    for keyword in ANNEX_E_IDENTIFIERS | ANNEX_E_UIDS | set(SAFE_ATTRIBUTES):
        assert tag_for_keyword(keyword) is not None, keyword
    assert not (set(SAFE_ATTRIBUTES) & (ANNEX_E_IDENTIFIERS | ANNEX_E_UIDS))
    assert DIRECT_IDENTIFIERS <= ANNEX_E_IDENTIFIERS
    # PS3.15 Annex E Table E.1-1 (from memory): these are certainly in the profile
    for keyword in ("PatientName", "PatientID", "PatientBirthDate", "InstitutionName",
                    "ReferringPhysicianName", "AccessionNumber", "StudyID", "OperatorsName"):
        assert keyword in ANNEX_E_IDENTIFIERS


def test_no_identifier_reaches_scan_repr_or_record(tmp_path: Path, site_key: Path) -> None:
    scan = load(identified(tmp_path), key=site_key)
    texts = all_strings(scan) + [repr(scan), json.dumps(scan.to_record())]
    for secret in (NAME, "Quill", "Marigold", PID, BIRTH, INSTITUTION, "Northfield", PHYSICIAN, "Brandt",
                   ACCESSION, "ZX-1"):
        assert not any(secret.lower() in t.lower() for t in texts), secret
    assert scan.metadata["Manufacturer"] == "Acme Imaging" and scan.metadata["BodyPartExamined"] == "CHEST"
    assert "pixels" not in repr(scan) and "array" not in repr(scan)


def test_allow_listed_text_echoing_an_identifier_is_dropped(tmp_path: Path, site_key: Path) -> None:
    scan = load(identified(tmp_path, BodyPartExamined="QUILL"), key=site_key)  # a surname typed in a field
    assert "BodyPartExamined" not in scan.metadata
    assert any("BodyPartExamined left out" in n for n in scan.notes)


def test_pseudonym_is_hmac_of_patient_id(tmp_path: Path, site_key: Path) -> None:
    path = identified(tmp_path)
    first = load(path, key=site_key)
    key = site_key.read_bytes()
    # RFC 2104 HMAC with SHA-256, computed by the standard library as the reference
    assert first.pseudonym == hmac.new(key, PID.encode(), hashlib.sha256).hexdigest()
    assert load(path, key=site_key).pseudonym == first.pseudonym  # stable for the same ID and key
    other_key = tmp_path / "other.key"
    assert load(path, key=other_key).pseudonym != first.pseudonym  # differs across sites


def test_pseudonym_falls_back_to_study_uid(tmp_path: Path, site_key: Path) -> None:
    path = identified(tmp_path, PatientID=None)
    scan = load(path, key=site_key)
    assert scan.pseudonym == hmac.new(site_key.read_bytes(), scan.study_uid.encode(), hashlib.sha256).hexdigest()
    assert any("Study Instance UID" in n for n in scan.notes)


def test_uid_policy(tmp_path: Path, site_key: Path) -> None:
    path = identified(tmp_path)
    kept = load(path, key=site_key)
    assert kept.study_uid and kept.series_uid and kept.sop_uid
    dropped = load(path, key=site_key, uid_policy="drop-uids")
    assert (dropped.study_uid, dropped.series_uid, dropped.sop_uid) == (None, None, None)
    assert not any(kept.study_uid in t for t in all_strings(dropped) + [json.dumps(dropped.to_record())])
    with pytest.raises(InputError, match="uid_policy"):
        load(path, key=site_key, uid_policy="scramble")


def test_site_key_created_once_with_mode_0600(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    where = tmp_path / "cfg" / "site.key"
    monkeypatch.setenv("CASEFILE_SITE_KEY", str(where))
    key = load_site_key()
    assert len(key) == 32 and where.read_bytes() == key
    assert stat.S_IMODE(where.stat().st_mode) == 0o600  # owner read/write only (common practice)
    assert load_site_key() == key  # read back, not regenerated
    short = tmp_path / "short.key"
    short.write_bytes(b"abc")
    with pytest.raises(InputError, match="short.key: site key is shorter"):
        load_site_key(short)


def test_raster_needs_no_key(tmp_path: Path) -> None:
    from PIL import Image

    png = tmp_path / "plain.png"
    Image.new("L", (8, 8), 7).save(png)
    never = tmp_path / "never.key"
    scan = load(png, key=never)
    assert scan.pseudonym is None and not never.exists()
