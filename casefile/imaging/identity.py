"""Identifier policy: the site key, keyed pseudonyms, and which DICOM attributes may leave imaging.

Direct identifiers never leave this room. We do not strip a deny-list; instead only the attributes in
``SAFE_ATTRIBUTES`` (technique and equipment type, none of them in PS3.15 Annex E Table E.1-1) are kept,
and the patient is represented by ``HMAC-SHA256(site key, PatientID)`` (or, with no Patient ID, of the
Study Instance UID). The site key lives in a file outside the ledger and is never recorded.
"""

from __future__ import annotations

import hashlib
import hmac
import os
import secrets
from pathlib import Path

from casefile.errors import InputError

KEY_ENV = "CASEFILE_SITE_KEY"
DEFAULT_KEY_PATH = Path("~/.config/casefile/site.key")
KEY_BYTES = 32
MIN_KEY_BYTES = 16

# Attributes listed in DICOM PS3.15 Annex E, Table E.1-1 (Basic Application Level Confidentiality
# Profile), by pydicom keyword. Typed from memory of the table; a subset, not the whole table. They are
# used to cross-check the allow-list and scrub values, not as the filter itself.
ANNEX_E_IDENTIFIERS: frozenset[str] = frozenset({
    "AccessionNumber", "AcquisitionComments", "AcquisitionDate", "AcquisitionDateTime",
    "AcquisitionDeviceProcessingDescription", "AcquisitionTime", "ActualHumanPerformersSequence",
    "AdditionalPatientHistory", "AdmissionID", "AdmittingDate", "AdmittingDiagnosesCodeSequence",
    "AdmittingDiagnosesDescription", "AdmittingTime", "Allergies", "AuthorObserverSequence",
    "BranchOfService", "CassetteID", "ContentCreatorName", "ContentDate", "ContentSequence",
    "ContentTime", "CountryOfResidence", "CurrentPatientLocation", "CustodialOrganizationSequence",
    "DataSetTrailingPadding", "DerivationDescription", "DetectorID", "DeviceSerialNumber", "DeviceUID",
    "DigitalSignaturesSequence", "DischargeDiagnosisDescription", "DistributionAddress",
    "DistributionName", "EthnicGroup", "FrameComments", "GantryID", "GeneratorID",
    "GraphicAnnotationSequence", "HumanPerformerName", "HumanPerformerOrganization", "IconImageSequence",
    "IdentifyingComments", "ImageComments", "ImagePresentationComments", "ImagingServiceRequestComments",
    "Impressions", "InstitutionAddress", "InstitutionCodeSequence", "InstitutionName",
    "InstitutionalDepartmentName", "InsurancePlanIdentification", "InterpretationApproverSequence",
    "InterpretationAuthor", "InterpretationDiagnosisDescription", "InterpretationIDIssuer",
    "InterpretationRecorder", "InterpretationText", "InterpretationTranscriber", "IssuerOfAdmissionID",
    "IssuerOfPatientID", "LastMenstrualDate", "MedicalAlerts", "MedicalRecordLocator", "MilitaryRank",
    "ModifiedAttributesSequence", "ModifiedImageDescription", "ModifyingDeviceID",
    "NameOfPhysiciansReadingStudy", "NamesOfIntendedRecipientsOfResults", "Occupation",
    "OperatorIdentificationSequence", "OperatorsName", "OrderCallbackPhoneNumber", "OrderEnteredBy",
    "OrderEntererLocation", "OriginalAttributesSequence", "OtherPatientIDs", "OtherPatientIDsSequence",
    "OtherPatientNames", "ParticipantSequence", "PatientAddress", "PatientAge", "PatientBirthDate",
    "PatientBirthName", "PatientBirthTime", "PatientComments", "PatientID",
    "PatientInsurancePlanCodeSequence", "PatientMotherBirthName", "PatientName",
    "PatientPrimaryLanguageCodeSequence", "PatientReligiousPreference", "PatientSex",
    "PatientSexNeutered", "PatientSize", "PatientState", "PatientTelephoneNumbers",
    "PatientTransportArrangements", "PatientWeight", "PerformedLocation",
    "PerformedProcedureStepDescription", "PerformedProcedureStepID", "PerformedProcedureStepStartDate",
    "PerformedProcedureStepStartTime", "PerformedStationAETitle", "PerformedStationName",
    "PerformingPhysicianIdentificationSequence", "PerformingPhysicianName", "PersonAddress",
    "PersonIdentificationCodeSequence", "PersonName", "PersonTelephoneNumbers",
    "PhysicianApprovingInterpretation", "PhysiciansOfRecord", "PhysiciansOfRecordIdentificationSequence",
    "PhysiciansReadingStudyIdentificationSequence", "PlateID", "PreMedication", "PregnancyStatus",
    "ProtocolName", "ReasonForStudy", "ReasonForTheImagingServiceRequest",
    "ReferencedPatientAliasSequence", "ReferencedPatientSequence", "ReferringPhysicianAddress",
    "ReferringPhysicianIdentificationSequence", "ReferringPhysicianName",
    "ReferringPhysicianTelephoneNumbers", "RegionOfResidence", "RequestAttributesSequence",
    "RequestedProcedureDescription", "RequestedProcedureID", "RequestedProcedureLocation",
    "RequestingPhysician", "RequestingService", "ResponsibleOrganization", "ResponsiblePerson",
    "ResultsComments", "ResultsDistributionListSequence", "ResultsIDIssuer",
    "ScheduledHumanPerformersSequence", "ScheduledPatientInstitutionResidence",
    "ScheduledPerformingPhysicianIdentificationSequence", "ScheduledPerformingPhysicianName",
    "ScheduledProcedureStepDescription", "ScheduledProcedureStepEndDate",
    "ScheduledProcedureStepLocation", "ScheduledProcedureStepStartDate", "SeriesDate",
    "SeriesDescription", "SeriesTime", "ServiceEpisodeDescription", "ServiceEpisodeID", "SmokingStatus",
    "SpecialNeeds", "StationName", "StudyComments", "StudyDate", "StudyDescription", "StudyID",
    "StudyIDIssuer", "StudyTime", "TextComments", "TextString", "TopicAuthor", "TopicKeywords",
    "TopicSubject", "TopicTitle", "VerifyingObserverIdentificationCodeSequence", "VerifyingObserverName",
    "VerifyingObserverSequence", "VerifyingOrganization", "VisitComments",
})

# The direct identifiers among them (names, IDs, birth date, addresses, institution): any allow-listed
# text value that repeats one of these values is left out of the metadata as well (belt and braces).
DIRECT_IDENTIFIERS: frozenset[str] = frozenset({
    "PatientName", "PatientID", "PatientBirthDate", "PatientAddress", "OtherPatientIDs",
    "OtherPatientNames", "PatientBirthName", "PatientMotherBirthName", "PatientTelephoneNumbers",
    "InstitutionName", "InstitutionAddress", "ReferringPhysicianName", "PerformingPhysicianName",
    "OperatorsName", "NameOfPhysiciansReadingStudy", "PhysiciansOfRecord", "RequestingPhysician",
    "AccessionNumber", "StudyID", "MedicalRecordLocator", "PersonName", "ResponsiblePerson",
})

# UIDs are also in Annex E (to be replaced when de-identifying); casefile keeps the three below by
# default so results can be attached to the study (uid_policy="drop-uids" removes them).
ANNEX_E_UIDS: frozenset[str] = frozenset({
    "StudyInstanceUID", "SeriesInstanceUID", "SOPInstanceUID", "FrameOfReferenceUID",
    "InstanceCreatorUID", "ReferencedSOPInstanceUID", "StorageMediaFileSetUID",
})

# The allow-list: the only data-set attributes copied into Scan.metadata. Technique, geometry and the
# equipment type; none is in ANNEX_E_IDENTIFIERS (a test checks). Device serial numbers, station names
# and all dates are deliberately absent. "TransferSyntaxUID" comes from the file meta.
SAFE_ATTRIBUTES: tuple[str, ...] = (
    "Modality", "SOPClassUID", "ImageType", "Rows", "Columns", "SamplesPerPixel", "BitsAllocated",
    "BitsStored", "HighBit", "PixelRepresentation", "PhotometricInterpretation", "PlanarConfiguration",
    "NumberOfFrames", "RescaleSlope", "RescaleIntercept", "RescaleType", "WindowCenter", "WindowWidth",
    "VOILUTFunction", "PixelSpacing", "ImagerPixelSpacing", "SliceThickness", "BodyPartExamined",
    "ViewPosition", "ImageLaterality", "Laterality", "Manufacturer", "ManufacturerModelName", "KVP",
)


def key_path(path: str | os.PathLike[str] | None = None) -> Path:
    """Where the site key lives: ``path``, else ``$CASEFILE_SITE_KEY``, else ``~/.config/casefile/site.key``."""
    if path is not None:
        return Path(path).expanduser()
    env = os.environ.get(KEY_ENV)
    if env:
        return Path(env).expanduser()
    return DEFAULT_KEY_PATH.expanduser()


def load_site_key(path: str | os.PathLike[str] | None = None) -> bytes:
    """Read the site key; on first use create it with 32 random bytes and mode 0600.

    The key is raw bytes. It must stay outside the ledger: whoever holds it can link pseudonyms back
    to patient IDs by trying candidates.
    """
    where = key_path(path)
    if not where.exists():
        try:
            where.parent.mkdir(parents=True, exist_ok=True, mode=0o700)
            fd = os.open(where, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o600)
        except FileExistsError:
            pass  # another process created it first; read theirs
        except OSError as exc:
            raise InputError(f"{where}: cannot create the site key ({exc.strerror or exc})") from None
        else:
            with os.fdopen(fd, "wb") as handle:
                handle.write(secrets.token_bytes(KEY_BYTES))
    try:
        key = where.read_bytes()
    except OSError as exc:
        raise InputError(f"{where}: cannot read the site key ({exc.strerror or exc})") from None
    if len(key) < MIN_KEY_BYTES:
        raise InputError(f"{where}: site key is shorter than {MIN_KEY_BYTES} bytes")
    return key


def pseudonym(key: bytes, value: str) -> str:
    """HMAC-SHA256 of the UTF-8 value under the site key, as hex."""
    return hmac.new(key, value.encode("utf-8"), hashlib.sha256).hexdigest()
