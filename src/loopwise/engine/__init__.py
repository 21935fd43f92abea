"""The engine: loop graph, reduction to loop transfers, certified Nyquist count, margins.

Stages in order: `diagram` (the loop graph and its structural checks) with `nesting`
(the loops each break opens, cascade nesting); `reduce` (the wiring reduced once to
loop components, every break's loop transfer) on `blocks` (many block applications
evaluated at once) and `program` (a component's elimination order); `winding` (the
contour and adaptive sampling), `certificate` (where the contour may stop) and
`stability` (P, N, Z), with `refusals` (located errors for what cannot be certified)
and `hidden` (closed-loop poles that exact cancellations hide); `margins` on `curve`
(the Nyquist curve's crossings: gain margins, stabilising gains) and `metrics`
(crossovers, sensitivity peaks, disk margin); `solve` (batched root and peak
searches); `batch` (one wiring in many parameter samples at once). `statespace`
(delay-free state-space forms) serves tests and tools only.
Nothing here imports matplotlib or scipy; the transfer-function value type
(`loopwise.transfer`) sits beneath both this package and the language.
"""
