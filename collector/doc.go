// Package collector is the reading model of the daemon and everything that
// brings readings in: the counter and sensor configuration, validation and
// normalisation (differential to cumulative counts, counts to particles/m³),
// the HTTP ingest handlers for POST /api/v1/readings and /api/v1/pressure,
// the streaming JSON/NDJSON decoding behind them, and the simulator that
// feeds the demo site.
//
// Every path in (HTTP, the simulator, the Modbus poller) goes through
// the same [Ingest]: decode, validate every element, and only when the whole
// request is good hand it to a [Sink], which returns once the data is
// durable. A request is all-or-nothing: the first bad element is reported as
// an [*InputError] naming its index and JSON field, and nothing is stored.
//
// The package imports only classify from the project; the store and the
// alarm engine are reached through the [Sink] interface and the observer
// callbacks of [Ingest].
package collector
