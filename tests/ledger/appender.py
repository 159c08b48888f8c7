"""A child process for the concurrency and crash tests: appends N amendment bodies to a ledger."""

import sys

from casefile.ledger import Ledger
from tests.ledger.bodies import amendment_body


def main() -> None:
    path, n, tag = sys.argv[1], int(sys.argv[2]), sys.argv[3]
    batch = int(sys.argv[4]) if len(sys.argv) > 4 else 1
    led = Ledger(path)
    print("ready", flush=True)
    for i in range(0, n, batch):
        led.append_many([("amendment", amendment_body(1, "a" * 64, f"{tag} {i + j}"), None) for j in range(batch)])
    led.close()


if __name__ == "__main__":
    main()
