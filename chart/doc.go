// Package chart draws residual curves: the relative residual of one or more
// convergence histories on a logarithmic axis against the iteration, with
// the tolerance as a dashed horizontal line, as SVG or PNG pictures. It is
// what `residua solve --plot`, `residua plot` and the watch page draw with,
// built on gonum.org/v1/plot.
//
// # What is drawn
//
// Each Series is one history (krylov.Progress rows in recording order); its
// RelResidual goes on the y axis (log scale, decades labelled 1e-8 and so
// on), its Iteration on the x axis. Several series are overlaid in distinct
// colours and line styles with a legend naming each and its iteration count.
// The title is Options.Title or, when that is empty, built from the matrix
// name, the preconditioner and the iteration count.
//
// A log axis cannot show zero: a zero relative residual (an exact solution)
// is drawn at a floor one decade below the smallest positive value in the
// picture, and the x axis label says how many points were clamped and to
// what. NaN and infinite values (a breakdown) are left out and counted in the
// same note. Long histories are thinned to Options.MaxPoints points per
// series, keeping each bucket's smallest and largest residual so that spikes
// survive.
//
// # Errors
//
// Drawing returns ErrNoData when no series has a drawable row, and I/O
// errors from the writer. Write picks the format from the file's extension
// (".svg" or ".png", any case) and writes through a temporary file renamed
// into place. Nothing here panics on user data.
package chart
