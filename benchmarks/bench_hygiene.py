"""Plain speed settings for the forward passes every method repeats, measured side by side in one run.

Occlusion, the deletion check and the randomisation check spend nearly all their time in forward
passes over batches of covered copies of one image. This prints, for a batch of such copies, the
median time of a forward pass under ``torch.no_grad()`` (what casefile uses) and
``torch.inference_mode()``, each with the input and weights in PyTorch's default (contiguous, NCHW)
memory format and in ``channels_last`` (NHWC), and the ratio of each to the default. Two models: the
ResNet-18 layout at 224 px (benchmarks/bench_explain.py, random weights) and the demo's TinyNet at 64 px.
Also the torch thread count (torch's default, one per core) against one thread. Asserts nothing.

Run: ``python benchmarks/bench_hygiene.py`` (about a minute on two cores).
"""

from __future__ import annotations

import contextlib
import copy
import statistics
import sys
import time
from collections.abc import Callable, Iterator
from pathlib import Path

import torch

sys.path.insert(0, str(Path(__file__).resolve().parent))
sys.path.insert(0, str(Path(__file__).resolve().parents[1]))
from bench_explain import ResNet18Shape  # noqa: E402

from demo_cases.nets import tiny_net  # noqa: E402

REPEATS = 7


def _batch(channels: int, size: int, n: int) -> torch.Tensor:
    """``n`` copies of one seeded image, each with a different 16 px square zeroed (as occlusion makes)."""
    x = torch.randn(1, channels, size, size, generator=torch.Generator().manual_seed(1)).repeat(n, 1, 1, 1)
    for i in range(n):
        r, c = (i * 16) % (size - 16), (i * 40) % (size - 16)
        x[i, :, r:r + 16, c:c + 16] = 0.0
    return x


@contextlib.contextmanager
def _grad_mode(name: str) -> Iterator[None]:
    with (torch.inference_mode() if name == "inference_mode" else torch.no_grad()):
        yield


def _timer(net: torch.nn.Module, x: torch.Tensor, grad: str) -> Callable[[], float]:
    def once() -> float:
        with _grad_mode(grad):
            t0 = time.perf_counter()
            net(x)
            return time.perf_counter() - t0
    return once


def compare(title: str, net: torch.nn.Module, x: torch.Tensor) -> None:
    net = net.eval()
    nhwc_net = copy.deepcopy(net).to(memory_format=torch.channels_last)  # the same weights, NHWC order
    x_nhwc = x.contiguous(memory_format=torch.channels_last)
    cases = {(grad, fmt): _timer(m, xs, grad) for grad in ("no_grad", "inference_mode")
             for fmt, m, xs in (("contiguous", net, x.contiguous()), ("channels_last", nhwc_net, x_nhwc))}
    times: dict[tuple[str, str], list[float]] = {k: [] for k in cases}
    for _ in range(2):  # warm-up
        for f in cases.values():
            f()
    for _ in range(REPEATS):  # interleaved, so drift in the machine's load touches every setting alike
        for k, f in cases.items():
            times[k].append(f())
    base = statistics.median(times[("no_grad", "contiguous")])
    print(f"{title}: a batch of {x.shape[0]} copies, {x.shape[2]} x {x.shape[3]} px, {torch.get_num_threads()} "
          f"torch threads, median of {REPEATS}")
    for (grad, fmt), ts in times.items():
        med = statistics.median(ts)
        print(f"  {grad:15} {fmt:14} {med * 1000:8.1f} ms   {base / med:5.2f}x the default")


def threads(title: str, net: torch.nn.Module, x: torch.Tensor) -> None:
    default = torch.get_num_threads()
    if default == 1:
        return
    out: dict[int, float] = {}
    with torch.no_grad():
        for n in (default, 1):
            torch.set_num_threads(n)
            net(x)
            out[n] = statistics.median(_timer(net, x, "no_grad")() for _ in range(REPEATS))
    torch.set_num_threads(default)
    print(f"  threads: {default} (torch's default, one per core) is {out[1] / out[default]:.2f}x one thread "
          f"({title})")


def main() -> None:
    torch.manual_seed(0)
    resnet, tiny = ResNet18Shape(), tiny_net(width=8)
    compare("ResNet-18 layout", resnet, _batch(3, 224, 32))
    threads("ResNet-18 layout", resnet, _batch(3, 224, 32))
    compare("demo TinyNet", tiny, _batch(1, 64, 256))
    threads("demo TinyNet", tiny, _batch(1, 64, 256))


if __name__ == "__main__":
    main()
