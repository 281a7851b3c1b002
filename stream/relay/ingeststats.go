package relay

import "stopgap/stream/whip"

// IngestStats returns the WHIP ingest's counters: sessions that exist now
// (connected or still connecting), accepted and ended sessions, and refused
// requests and dropped half-open sessions by reason.
func (r *Relay) IngestStats() whip.ServerStats { return r.whip.Stats() }
