"""A child process for the concurrency test: wait for the go file, then record one reading or one account."""

import sys
import time
from pathlib import Path

from casefile.errors import ValidationError
from casefile.ledger import Ledger
from casefile.review import record_review
from casefile.review.accounts import add_reader


def main() -> None:
    url, go, what = sys.argv[1:4]
    with Ledger(url, create=False) as led:
        print("ready", flush=True)
        while not Path(go).exists():
            time.sleep(0.001)
        try:
            if what == "review":
                e = record_review(led, "c-000001", reader="rad-01", verdict="agree", draw_id=sys.argv[4])
            else:
                e = add_reader(led, "rad-02", "correct horse battery", "correct horse battery")
            print(f"recorded {e.seq}", flush=True)
        except ValidationError as exc:
            print(f"refused {exc}", flush=True)


if __name__ == "__main__":
    main()
