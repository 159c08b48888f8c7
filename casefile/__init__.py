"""casefile: tamper-evident records of image-classifier decisions and their explanations."""

__version__ = "0.1.0"
