"""A child process for the claims tests: one worker of explain_claimed that takes four inputs at a time."""

import sys

from casefile.ledger import Ledger
from casefile.models import load_model
from casefile.pipeline import RunSettings
from casefile.workers import explain_claimed


def main() -> None:
    store, model, card, folder = sys.argv[1:5]
    loaded = load_model(model, card)
    with Ledger(store, create=False) as led:
        print("ready", flush=True)
        explain_claimed(led, [folder], loaded, RunSettings(patch=8, stride=4), worker="doomed", batch=4)


if __name__ == "__main__":
    main()
