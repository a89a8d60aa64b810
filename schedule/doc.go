// Package schedule provides gain sequences a_k for stochastic approximation
// and checks of the classical convergence conditions
//
//	Σ a_k = ∞   (the steps can travel any distance)
//	Σ a_k² < ∞  (the accumulated noise has finite variance)
//
// from Robbins & Monro (1951), "A stochastic approximation method",
// Ann. Math. Statist. 22(3).
//
// Perturbation sizes c_k for Kiefer–Wolfowitz and SPSA gradients are a
// [Sizes] sequence ([PowerSizes] c/(k+1)^γ); [CheckKieferWolfowitz] and
// [CheckSPSA] test the joint conditions on a_k and c_k, which differ by
// method, and [SpallGains] chooses SPSA gains by Spall's (1998) guidelines.
//
// # Indexing
//
// Every schedule in this library counts from k = 0: the first update of a
// run uses Gain(0), the second Gain(1), and so on. The power family is
// therefore written a/(k+1+A)^α so that its first gain is finite.
//
// # Adaptive schedules
//
// A schedule whose gain depends on the measurements (Kesten's rule)
// implements [Adaptive]. Its gain index is kept by the caller of the
// schedule (the update core in package sa), which asks Advance after every
// step whether the index should move on; the schedule value itself holds no
// state, so one value may be shared by many runs and goroutines.
//
// # Concurrency
//
// All schedules in this package are immutable values and safe for
// concurrent use.
package schedule
