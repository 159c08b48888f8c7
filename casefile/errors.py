"""Error types shared by every room; each carries a one-line message fit for a user."""


class CasefileError(Exception):
    """Base class: the message is one line that names the thing at fault and the problem."""


class InputError(CasefileError):
    """An input file cannot be used (unreadable, corrupt, unsupported, wrong shape)."""


class ModelError(CasefileError):
    """A model or its card cannot be loaded, or they disagree."""


class ValidationError(CasefileError):
    """A body does not satisfy the schema of its kind; nothing was written."""


class DuplicateCaseError(ValidationError):
    """The ledger already holds a case for this input, model and settings (or this case id); nothing was written."""


class UsageError(CasefileError):
    """An option or setting cannot work as given (e.g. an occlusion patch larger than the model input);
    refused before anything is read or written. The command line exits 2 with its usage line."""


class LedgerError(CasefileError):
    """The ledger cannot be opened or written as asked."""


class ExplainError(CasefileError):
    """An explanation method cannot run with the settings given."""


class OutputError(CasefileError):
    """A file cannot be written where it was asked for (folder missing, no permission, disk full)."""


class ExchangeError(CasefileError):
    """A DICOM object cannot be made, or the archive refused it or cannot be reached."""


def one_line(exc: BaseException, *, limit: int = 160, last: bool = False) -> str:
    """An exception's message as one line for a user: its first non-empty line (``last``: its last, where
    a library puts the cause after a trace of its own), cut to ``limit`` characters, or the exception's
    type name when the message is empty."""
    lines = [x.strip() for x in str(exc).splitlines() if x.strip()]
    if not lines:
        return type(exc).__name__
    text = lines[-1] if last else lines[0]
    return text if len(text) <= limit else text[: limit - 1] + "…"
