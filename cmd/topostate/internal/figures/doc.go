// Package figures draws the figures of one analysis in a topostate
// warehouse: group-mean Betti curves with a standard-error band, the elbow
// curve, occupancy and dwell time by group, mean transition matrices and
// state centroid matrices, as PNG and SVG (gonum.org/v1/plot).
//
// Load reads everything a figure shows with plain SQL on a read-only
// connection and summarises it (means, standard errors) into Data; the
// drawing functions only lay Data out. It must not write to the warehouse.
// It lives under cmd/topostate because only the command line (plot, and
// later the HTML report) draws; the warehouse itself stays image-free.
package figures
