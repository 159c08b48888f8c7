"""Window arithmetic along one axis of a feature map, for computing only what a patch can change.

A sliding-window layer (convolution or pooling) with kernel ``k``, stride ``s``, padding ``p`` and
dilation ``d`` computes output ``o`` from input positions ``o*s - p + j*d`` for ``j = 0 .. k-1``. If only
the input positions ``[a, b)`` differ from a cached run, the outputs that can differ are those whose
window meets ``[a, b)``: the projective field of the change, ``[ceil((a + p - d(k-1)) / s),
floor((b - 1 + p) / s)]``, clipped to the output. Conversely, computing outputs ``[o0, o0 + n)`` needs
inputs ``[o0*s - p, (o0 + n - 1)*s - p + d(k-1) + 1)``. Ranges are half-open; an empty change is
``(0, 0)``.
"""

from __future__ import annotations

from dataclasses import dataclass

EMPTY = (0, 0)


@dataclass(frozen=True)
class Window:
    """One axis of a sliding-window layer."""

    kernel: int
    stride: int
    padding: int
    dilation: int = 1

    @property
    def span(self) -> int:
        """Input positions one output reads: d(k-1) + 1."""
        return self.dilation * (self.kernel - 1) + 1

    def out_size(self, size: int, ceil_mode: bool = False) -> int:
        """Output length for an input of ``size`` (torch's formula, floor or ceil mode)."""
        room = size + 2 * self.padding - self.span
        n = (-(-room // self.stride) if ceil_mode else room // self.stride) + 1
        if ceil_mode and (n - 1) * self.stride >= size + self.padding:
            n -= 1  # torch drops a last window that would start in the right padding
        return n

    def changed(self, a: int, b: int, out_size: int) -> tuple[int, int]:
        """Outputs that can differ when inputs ``[a, b)`` differ (the projective field), clipped."""
        if a >= b:
            return EMPTY
        lo = max(0, -(-(a + self.padding - self.span + 1) // self.stride))
        hi = min(out_size, (b - 1 + self.padding) // self.stride + 1)
        return (lo, hi) if lo < hi else EMPTY

    def needs(self, o0: int, n: int) -> tuple[int, int]:
        """Input range (may reach into the padding, below 0 or past the end) that outputs ``[o0, o0+n)`` read."""
        start = o0 * self.stride - self.padding
        return start, start + (n - 1) * self.stride + self.span


def union(x: tuple[int, int], y: tuple[int, int]) -> tuple[int, int]:
    """The smallest range holding both (an empty range adds nothing)."""
    if x[0] >= x[1]:
        return y
    if y[0] >= y[1]:
        return x
    return min(x[0], y[0]), max(x[1], y[1])


def truncate(r: tuple[int, int], most: int) -> tuple[int, int]:
    """``r`` cut to at most ``most`` positions about its centre (projective-field truncation)."""
    a, b = r
    if b - a <= most:
        return r
    centre = (a + b) // 2
    a = centre - most // 2
    return a, a + most


def place(lo: int, length: int, size: int) -> int:
    """Start of a window of ``length`` (<= size) that holds ``[lo, lo + length)`` or, near the end, ends flush."""
    return max(0, min(lo, size - length))


__all__ = ["EMPTY", "Window", "place", "truncate", "union"]
