"""The engine: loop graph, reduction to loop transfers, certified Nyquist count, margins.

Stages in order: `diagram` (the loop graph and its structural checks), `reduce`
(the interconnection matrix and every break's loop transfer), `statespace`
(delay-free state-space forms), `winding` (the contour and adaptive sampling),
`stability` (P, N, Z), `margins` and `solve` (batched root and peak searches).
Nothing here imports matplotlib or scipy; the transfer-function value type
(`loopwise.transfer`) sits beneath both this package and the language.
"""
