// Package spc is the control-chart core of lotwatch: attribute control
// charts (p, np, u, c) with per-lot limits, exact probability limits,
// Laney p′/u′ limits, run rules on standardized values, diagnostics,
// interval estimates for rates and inspection planning.
//
// Everything here is a pure function on plain data. The package does no
// I/O and knows nothing of SQL, HTTP or files.
package spc
