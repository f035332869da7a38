// Package fit holds assort's numerics: k-means, Gaussian mixtures, their
// seeding, model selection and evaluation. It does no I/O and imports
// nothing that talks to a database.
//
// Conventions, fixed here once for the whole package:
//
//   - A row is an observation and a column a feature. Matrices are stored
//     row-major in plain []float64 slices; a Dense holds n rows of d
//     features.
//   - Units are the caller's. Scaling (see Scaling) is applied by the caller
//     before fitting and undone when reporting parameters.
//   - Inside the package clusters are numbered from 0; at the boundary
//     (tables, reports) they are numbered from 1. Fitted clusters are
//     ordered by descending size, ties broken by the lexicographic order of
//     their centres, so the numbering does not depend on the seeding order.
//   - Work is split into fixed chunks of rows (Source.Chunks). Workers take
//     chunks in any order, but per-chunk partial sums are reduced in chunk
//     order, so a fit gives bit-identical results for any number of workers.
//   - Programmer misuse (mismatched shapes) panics with a "fit:" prefix.
//     Anything the data can cause (too few rows, no convergence, a singular
//     covariance) is returned as an error or recorded in the result.
//   - Long loops check ctx.Err() between iterations.
package fit
