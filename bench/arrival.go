package bench

import "stopgap/internal/lossmodel"

// NeverArrivesUs is the arrival time of a lost frame in a Schedule: the
// simulated link's lossmodel.NeverArrivesUs, so that simulated and recorded
// arrivals read the same. "Arrived by now" is simply ArrivalUs <= nowUs.
const NeverArrivesUs = lossmodel.NeverArrivesUs
