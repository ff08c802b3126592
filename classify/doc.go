// Package classify holds the pure computation of cleanroom classification:
// ISO 14644-1 class limits (2015 and the legacy 1999 edition), EU GMP Annex 1
// grade limits, FED-STD-209E equivalence, sampling plans and the layout of
// their locations, certification verdicts (pass, fail or incomplete) with
// every sample and departure a test report needs, sequential sampling, the
// macroparticle descriptor, the statistics they rest on (Student t, Poisson
// bounds, UCL), rolling-window means and the ISO 14644-3 recovery rate.
//
// It does no I/O and imports no other package of the project, so every
// consumer (the alarm engine, the certify command, the HTTP API) gets the same
// answer from the same code.
package classify
