// Package models holds the next-item recommenders waymark learns from the click
// stream and the blend that combines them.
//
// Every model implements [Model]: it observes clicks one at a time, in event
// time, and proposes scored candidates for a session. The same values serve
// live queries and offline replay, so a model must be a deterministic function
// of the clicks it observed, in the order it observed them.
//
// # Decay
//
// All counts decay exponentially in event time with a half-life H:
// w(t) = w(t0) · 2^(-(t-t0)/H). Rather than touching every count as time
// passes, a count is kept in landmark form: a click at time t adds
// 2^((t-ref)/H), where ref is a fixed reference time shared by all models of
// one pipeline. The decayed value at time T is the stored value times
// 2^(-(T-ref)/H), a factor common to every count, so rankings and ratios such
// as cosine similarity can be read straight from the stored values. Stored
// values only grow, which also makes incremental top-N lists exact.
//
// # The methods
//
// Pop, Markov, SR and IKNN learn from clicks; SKNN, V-SKNN and V-STAN keep
// an index of recent past sessions and let the most similar vote; Content
// learns TF-IDF neighbours from catalogue records, so an item nobody has
// clicked has neighbours; Fresh explores young items by Thompson sampling;
// Trending ranks popularity per context; Prior carries item-item statistics
// imported from another deployment and fades as local clicks arrive. A
// [Blend] combines signals; [Set] builds any of them from a spec such as
// "sr(window=5)" and shares one instance among all users of a spec.
//
// # Cold start
//
// A new visitor with no clicks gets popularity, or popularity in the
// request's context (Trending), or a session seeded from declared
// preferences (Set.SeedQuery). A new item gets content neighbours from its
// record at once, and the blend weighs content by n0/(n0+n) of the clicks
// the pair has, so collaborative evidence takes over as it accumulates. A
// new site gets priors. Items marked unavailable in the catalogue are never
// recommended.
//
// # Persistence
//
// Models never touch the disk. A model that keeps state implements
// [Persistent]: it writes what changed since its last flush into a [KV] the
// caller provides (one Badger transaction in serve) and reloads entries under
// its prefix at start.
package models
