package online_test

import (
	"fmt"

	"livefield/online"
)

// A unit's significance is decided at looks on a doubling grid of its spike
// count, each at a level that spends part of α.
func ExampleLookLevel() {
	alpha := 0.001
	for _, spikes := range []float64{30, 400, 6400} {
		j := online.LookIndex(spikes)
		fmt.Printf("%5.0f spikes: look %d at %.0f spikes, level %.2g\n", spikes, j, online.LookSpikes(j), online.LookLevel(alpha, j))
	}
	// Output:
	//    30 spikes: look 1 at 25 spikes, level 0.0005
	//   400 spikes: look 5 at 400 spikes, level 3.3e-05
	//  6400 spikes: look 9 at 6400 spikes, level 1.1e-05
}

// "No field" waits until a field of the smallest size of interest would
// have been seen: here a drive of variance 0.04 (the default), Poisson
// counts, at a small and at the reference dimension.
func ExampleDetectionSpikes() {
	none := online.SpikeCorrelation{Mean: 1, Var: 1}
	for _, d := range []int{144, 3072} {
		n := online.DetectionSpikes(0.001, online.DefaultSmallestField, d, none, 1)
		fmt.Printf("D = %d: no field from %.0f spikes\n", d, n)
	}
	// Output:
	// D = 144: no field from 3200 spikes
	// D = 3072: no field from 12800 spikes
}

// The posterior test on a correlated stimulus compares its statistic with an
// F distribution: with ν = 2 numerator degrees of freedom the tail has the
// closed form (1 + 2f/m)^(−m/2).
func ExampleFTail() {
	p, nl := online.FTail(2.75, 2, 10)
	fmt.Printf("p = %.4f, −log10 p = %.3f\n", p, nl)
	// Output:
	// p = 0.1118, −log10 p = 0.952
}
