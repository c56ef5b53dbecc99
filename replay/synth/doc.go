// Package synth is a synthetic recording rig: a model probe in visual cortex
// whose units fire as linear–nonlinear–Poisson (LNP) cells to a stimulus
// source, with their ground truth, and a publisher that plays the recording
// to NATS over the wire protocol as a real rig would.
//
// # Model
//
// A Scenario (defaults: 32 channels, 16×16 pixels, 12 lags, 60 Hz frames)
// and its Seed fix everything. The default population (DefaultUnits units)
// mixes simple cells (Gabor fields of varied position, orientation, polarity
// and latency 40–90 ms, with a biphasic time course), on- and off-centre
// cells (difference of Gaussians), one direction-selective cell (a Gabor
// whose phase drifts across lags: a space–time oriented, non-separable
// field), energy-model complex cells (Adelson & Bergen 1985: a quadrature
// pair, squared and summed), units with no field (Poisson at MeanRate), a
// low-rate simple cell (LowRate) and a simple cell that starts firing LateAt
// seconds into the block.
//
// Filters are lag-major [lag][row][col] with unit norm; lag 0 is the frame on
// screen during the bin, lag k the frame k bins before. The response x of a
// filter to the lagged frames is divided by the pixel standard deviation of
// a white source (1 for other sources), so x has unit variance under white
// noise. The rate in a bin is
//
//	linear units:  r = base·exp(g·x), base = MeanRate·exp(−g²/2)
//	energy units:  r = MeanRate·(0.1 + 0.9·(x₁² + x₂²)/2)
//	no field:      r = MeanRate
//
// capped at MaxRate. The exponential is the canonical LNP nonlinearity; the
// base makes MeanRate the mean rate when x is Gaussian (close for noise over
// many pixels). Each bin's count is Poisson with mean r·(end−start), and the
// spike times are uniform within the bin. The spikes of bin k come from a
// generator seeded by (Seed, k), so they depend only on the seed, k and the
// frames.
//
// # Concurrency
//
// A Cortex belongs to one goroutine: Bin changes its lag ring and scratch.
// Units returns ground truth that may be shared. Publish runs on the
// caller's goroutine until the block is sent or ctx ends; it drives the Cortex,
// which must not be used elsewhere meanwhile.
package synth
