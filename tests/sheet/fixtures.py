"""Builds realistic case bodies, blobs and reviews for the sheet and exchange tests (synthetic data only)."""

from __future__ import annotations

import copy
import hashlib
import io

import numpy as np
from PIL import Image

ENTRY_HASH = hashlib.sha256(b"synthetic entry for the sheet tests").hexdigest()
# A UID under the 2.25 root (UUID-derived UIDs: DICOM PS3.5 B.2); the number itself is arbitrary.
STUDY_UID = "2.25.170141183460469231731687303715884105727"
SERIES_UID = "2.25.270141183460469231731687303715884105727"
SOP_UID = "2.25.370141183460469231731687303715884105727"


def _digest(b: bytes) -> str:
    return hashlib.sha256(b).hexdigest()


def display_image(size: int = 64, seed: int = 3) -> np.ndarray:
    """A grey picture with two bright oval 'fields', a round spot and a burned-in corner marker."""
    rng = np.random.default_rng(seed)
    yy, xx = np.mgrid[0:size, 0:size] / (size - 1)
    img = 0.15 + 0.05 * rng.standard_normal((size, size))
    for cx in (0.3, 0.7):
        img += 0.55 * (((xx - cx) / 0.18) ** 2 + ((yy - 0.5) / 0.35) ** 2 < 1)
    img += 0.3 * np.exp(-(((xx - 0.68) ** 2 + (yy - 0.42) ** 2) / 0.004))
    img[2:6, 2:10] = 1.0  # a burned-in marker
    return (np.clip(img, 0, 1) * 255).astype(np.uint8)


def influence_map(size: int, centre: tuple[float, float], spread: float, seed: int) -> np.ndarray:
    rng = np.random.default_rng(seed)
    yy, xx = np.mgrid[0:size, 0:size] / (size - 1)
    m = np.exp(-(((xx - centre[0]) ** 2 + (yy - centre[1]) ** 2) / spread))
    m += 0.05 * rng.random((size, size))
    return m.astype("<f4")


def _png(a: np.ndarray) -> bytes:
    buf = io.BytesIO()
    Image.fromarray(a).save(buf, format="PNG")
    return buf.getvalue()


# An intended-use statement long enough to wrap to five or more lines in the identity column.
LONG_USE = ("Demonstration only: sorts synthetic 64x64 chest-like pictures into clear, nodule or artefact. "
            "Trained on generated pictures; not validated for any real patient. Any finding must be read "
            "by a qualified radiologist under the local clinical protocol; the model card lists the "
            "operating point and the known failure modes.")


BORDER_ROI = {"rule": "border", "pixels": 8}  # the demo cards' rule: leave out an 8-pixel border


def build_case(*, size: int = 64, n_maps: int = 3, dicom: bool = True, case_id: str = "c-000123",
               intended_use: str | None = None, pseudonym: str | None = None, roi: dict | None = BORDER_ROI,
               weights_pinned: bool | None = None, flags: bool = False, n_classes: int = 3,
               occlusion_params: dict | None = None) -> tuple[dict, dict[str, bytes]]:
    """A case body shaped like DEVELOPERS.md "Case body", and its blobs keyed by SHA-256 hex.

    ``roi`` goes to ``model.roi`` (None: an older record without it); ``weights_pinned`` to
    ``model.weights_pinned``; ``flags`` adds the flag fields (``checks[i].flags``, ``flagged``,
    ``flags``); ``n_classes`` 4 adds a fourth class, so the result shows the top 3 of 4."""
    blobs: dict[str, bytes] = {}

    def put(b: bytes) -> str:
        d = _digest(b)
        blobs[d] = b
        return d

    disp = display_image(size)
    display_blob = put(_png(disp))
    methods = [
        ("gradcam", {"layer": "features.3", "target": "nodule"}, (0.68, 0.42), 0.01),
        ("occlusion", occlusion_params or {"patch": 8, "stride": 4, "fill": 0.0, "target": "nodule"}, (0.66, 0.45),
         0.02),
        ("gradient", {"target": "nodule", "smoothing": "none"}, (0.7, 0.4), 0.005),
    ][:n_maps]
    maps = []
    for i, (method, params, centre, spread) in enumerate(methods):
        m = influence_map(size // 4 if method == "gradcam" else size, centre, spread, seed=10 + i)
        maps.append({
            "method": method, "params": params, "shape": list(m.shape),
            "raw_blob": put(m.tobytes()), "overlay_blob": put(_png(disp)),
            "min": float(m.min()), "max": float(m.max()),
        })
    labels = ["clear", "nodule", "artefact", "motion"][:n_classes]
    scores = {"clear": 0.081, "nodule": 0.873, "artefact": 0.046, "motion": 0.0}
    if n_classes == 4:
        scores.update(artefact=0.026, motion=0.020)
    scores = {k: scores[k] for k in labels}
    body = {
        "case_id": case_id,
        "recorded_at": "2026-03-14T09:26:53Z",
        "software": {"casefile": "0.1.0", "python": "3.11.9", "torch": "2.13.0", "numpy": "2.4.6"},
        "input": {
            "file_name": "scan-0007.dcm" if dicom else "bench-photo-0007.png",
            "file_sha256": _digest(b"file bytes " + case_id.encode()),
            "pixel_sha256": _digest(disp.tobytes()),
            "kind": "dicom" if dicom else "raster",
            "modality": "DX" if dicom else "RASTER",
            "width": size, "height": size, "channels": 1,
            "spacing_mm": [0.7, 0.7] if dicom else None,
            "window": {"center": 40.0, "width": 400.0} if dicom else None,
            "frame": None,
            "pseudonym": "9f2c4e1a7b3d5f60" if dicom else None,
            "study_uid": STUDY_UID if dicom else None,
            "series_uid": SERIES_UID if dicom else None,
            "sop_uid": SOP_UID if dicom else None,
            "notes": ["burned-in annotation flag: NO"] if dicom else [],
            "display_blob": display_blob,
        },
        "model": {
            "name": "tiny-chest-net", "version": "1.4.2",
            "digest": _digest(b"model weights"), "card_digest": _digest(b"model card"),
            "labels": labels, "layer": "features.3",
        },
        "preprocessing": {"input": {"channels": 1, "height": size, "width": size}, "resize": [size, size],
                          "mean": [0.5], "std": [0.25]},
        "settings": {"methods": [m[0] for m in methods], "seed": 0},
        "settings_digest": _digest(b"settings"),
        "result": {
            "label": "nodule", "label_index": 1, "confidence": 0.873, "scores": scores,
            "top": [{"label": k, "p": v} for k, v in sorted(scores.items(), key=lambda kv: -kv[1])][:3],
            "source": "casefile",
        },
        "maps": maps,
        "checks": [
            {"name": "model-randomisation", "value": 0.12, "threshold": 0.5, "outcome": "pass",
             "meaning": "the map changes when the learned weights are scrambled, so it depends on training"},
            {"name": "method-agreement", "value": 0.41, "threshold": 0.5, "outcome": "warn",
             "meaning": "Grad-CAM and occlusion only partly agree on where the evidence is"},
            {"name": "deletion", "value": 0.31, "threshold": 0.1, "outcome": "pass",
             "meaning": "removing the most-attributed region lowers the score more than a random region"},
            {"name": "region-focus", "value": 0.22, "threshold": 0.6, "outcome": "fail",
             "meaning": "most attribution lies outside the region of interest (markers, text or border)"},
            {"name": "numerical-validity", "value": 1.0, "threshold": 1.0, "outcome": "pass",
             "meaning": "no NaN or infinite values in scores or maps"},
            {"name": "confidence", "value": None, "threshold": 0.6, "outcome": "not-run",
             "meaning": "confidence was not compared with the card's operating point"},
        ],
        "status": "fail",
    }
    if roi is not None:
        body["model"]["roi"] = dict(roi)
    if weights_pinned is not None:
        body["model"]["weights_pinned"] = weights_pinned
    if flags:  # region focus sends the case to a person; the method-agreement warning only informs
        for ch in body["checks"]:
            ch["flags"] = ch["name"] == "region-focus"
        body["flagged"], body["flags"] = True, ["region-focus"]
    if intended_use is not None:
        body["intended_use"] = intended_use
    if pseudonym is not None:
        body["input"]["pseudonym"] = pseudonym
    return body, blobs


def reviews(n: int = 2) -> list[dict]:
    """Review bodies as the review room records them (reader, verdict, label, note, time)."""
    base = [
        {"case_id": "c-000123", "reader": "reader-07", "verdict": "agree", "label": "nodule",
         "note": "Spot matches the highlighted area; follow-up per local protocol.",
         "case_seq": 7, "reviewed_at": "2026-03-15T10:02:11Z", "seq": 9},
        {"case_id": "c-000123", "reader": "reader-12", "verdict": "unsure",
         "note": "Marker in the corner draws part of the occlusion map. Ünïcode ok: Привет, 日本語, ✓",
         "case_seq": 7, "reviewed_at": "2026-03-16T14:40:00Z", "seq": 12},
    ]
    out = []
    for i in range(n):
        r = copy.deepcopy(base[i % 2])
        if i >= 2:
            r["reader"] = f"reader-{20 + i}"
            r["seq"] = 12 + i
            r["note"] = (f"Second read number {i}. " + "The region of interest was checked against the "
                         "original study and the annotation layer; no further remarks. " * 2)
        out.append(r)
        if i == 3:
            r["amends_seq"] = 9
    return out


def amendments() -> list[dict]:
    """One amendment body (schemas/amendment.schema.json) pointing at the case entry."""
    return [{"amends_seq": 7, "amends_hash": ENTRY_HASH, "case_id": "c-000123", "author": "qa-lead-2",
             "reason": "model version label corrected after release notes were checked",
             "changes": {"model.version": "1.4.3"}, "amended_at": "2026-03-17T08:00:00Z", "seq": 15}]


class BlobStore:
    """A stand-in for ``ledger.blob``: bytes by digest, a clear KeyError when absent."""

    def __init__(self, blobs: dict[str, bytes]):
        self.blobs = dict(blobs)

    def __call__(self, digest: str) -> bytes:
        return self.blobs[digest]
