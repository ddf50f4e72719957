// Package session turns a click stream into live next-item answers.
//
// # Parts
//
//   - [Tracker] keeps each visitor session's recent clicks (a window of 20
//     by default), ends a session after 30 minutes of event-time inactivity
//     and caps the sessions tracked, evicting the least recently active.
//   - [Pipeline] is the learning path shared by serve and replay: intern the
//     item, update the window, let every model observe the click. It is a
//     deterministic function of the events applied, in their order.
//   - [Engine] drives a Pipeline from the bus: it applies batches under a
//     write lock, flushes state and stream position to the store in one
//     transaction, acknowledges the bus after the commit and answers
//     queries under a read lock.
//   - [Server] is the HTTP API; [Service] wires store, bus, engine,
//     consumer and HTTP into one running process.
//
// # Exactly-once effect
//
// Delivery from JetStream is at least once. The store holds the last
// applied sequence next to the counts it produced; the consumer starts after
// it and the engine skips anything at or below it, so a restart at any
// moment neither loses nor double-counts an event. Session windows are part
// of the flushed state, so a session that spans a restart continues exactly
// as it would have.
//
// # Time
//
// Session timeouts, decay and expiry use event time (the events' ts), never
// the wall clock, so a replay of a log computes what the live service did.
package session
