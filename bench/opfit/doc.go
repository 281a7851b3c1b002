// Package opfit fits an operator's cutoff to that operator's own driving.
//
// Measures, from the operator's control inputs, the vehicle's true state and
// what the console showed on each tick:
//
//   - ReversalCount: the steering reversal count of Markkula and Engström
//     (2006), as standardised in SAE J2944 (second-order Butterworth
//     low-pass run forward and backward, stationary points, gap angle), and
//     ReversalRates per displayed state;
//   - Samples and Describe: the deviation of the operator's steering from
//     the pure pursuit follower of Coulter (1992) on the true state,
//     attributed to the tick on screen a reaction time earlier, compared for
//     PREDICTED ticks by confidence band against STALE and LIVE ticks;
//   - GapCosts and Recommend: the same deviation integrated over each gap
//     and the recovery after it, compared between the cutoffs the gaps were
//     driven at, giving the recommended cutoff with a bootstrap interval over
//     whole gaps, or no recommendation and the reason.
//
// Recommend compares whole gaps rather than ticks because a predicted
// picture that misleads costs most after it has left the screen: the
// operator steers toward a misread position and, when the picture turns
// STALE, holds that command; neither the ticks of drives at a low cutoff nor
// those of drives at cutoff 1 contain that switch, so a tick-by-tick
// comparison cannot see its cost.
//
// Course and SimOperator simulate operators for the tests: a path follower
// with a perception delay, noise and a parameter for how much a predicted
// picture misleads it, driving the simdrive road in closed loop through the
// filter, the confidence model and the policy, in virtual time.
//
// A recommendation becomes a proposal in the operator's profile history
// (stream/operator, Editor.Propose as the tune actor, within the policy);
// applying it is a separate action.
package opfit
