// Package online keeps the running receptive-field estimates of every unit
// of one mapping block: pure computation, no I/O.
//
// # What it owns
//
// Mapper is the whole per-block estimator: feed it one bin at a time
// (AddBin: the frame on screen and the spike counts per unit; it only
// updates sufficient statistics, cheaply) and once a second call Update,
// which folds the new bins into the ridge by the cheaper exact route (the
// block update, or a re-solve from the statistics after a backlog) and
// returns an immutable Snapshot. Its parts are usable on their own:
//
//   - Ridge: the exact ridge solution with a free intercept for many
//     response columns, kept by block recursive least squares with one
//     inverse-covariance state shared by all columns (units), or re-anchored
//     from sufficient statistics (Anchor);
//   - STA: spike-triggered averages, their split halves and the centred
//     cross-correlations and spike-count autocovariances;
//   - WhiteTest and PosteriorTestCorrected: significance against the
//     white-noise null (whitened for the spike train's autocorrelation) or,
//     for correlated stimuli, the ridge statistic with its residual degrees
//     of freedom, an F reference and a correction for the counts'
//     autocorrelation (autocorr.go); ChiSquareTail, FTail;
//   - looks that spend α over the block (sequential.go), the power rule
//     behind "no field" (power.go), the sampling z of the ridge weights
//     (zscore.go), cross-validated predictive quality (predict.go) and the
//     drift warning (drift.go);
//   - SplitHalf, SpearmanBrown, Project and Trend: split-half reliability
//     and the projected time until it reaches a target;
//   - STC: spike-triggered covariance in a reduced space with a
//     random-matrix null bound;
//   - FeatureFinder: peak lag, the spatial map, a Gaussian fit of centre and
//     extent, polarity and space–time separability;
//   - Classify and Summarize: the unit status and the block summary;
//   - LagGram, BatchRidge and Evidence: the whole block at once from lag
//     cross-products, and the empirical-Bayes choice of the ridge penalty.
//   - PriorFitter: the smooth-local estimate, the posterior mean under an
//     evidence-optimised smoothness-and-locality prior in a window around
//     the field; BinStore and PoissonMAP: its offline refinement with the
//     Poisson likelihood of the exponential LNP model (poisson_map.go).
//
// Size limits (MaxPixels, MaxLags, MaxDim) and the smallest penalty
// (MinLambda) are in limits.go; the tests' simulator of stimuli, null spike
// trains and LNP units is internal/lnp.
//
// Layouts: a lagged stimulus or an estimate of D = pixels·lags values is
// lag-major, [lag][row][column], lag 0 the frame on screen during the bin.
//
// # Goroutines
//
// None of the accumulators (Mapper, Ridge, STA, STC, LagGram, Trend,
// WhiteTest, FeatureFinder, EvidenceBasis) is safe for concurrent use: one
// goroutine, the ingest loop, owns a Mapper and calls all its methods.
// Update spreads the per-unit statistics and the matrix products over all
// cores and returns only when they are done; no goroutine outlives a call.
// Snapshots (and the Floats inside them) are never written after Update
// returns them, so any goroutine may read them.
//
// # Errors
//
// Data that cannot be used (a frame of the wrong size or with a non-finite
// value, an unknown unit, a negative count) is refused with an error and
// leaves the estimates as they were. Non-finite statistics (a reliability
// before any spike) are Float NaN, which encodes as JSON null.
package online
