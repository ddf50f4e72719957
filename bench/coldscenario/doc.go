// Command coldscenario writes a synthetic cold-start scenario of an invented
// shop, for the replay comparisons of issue 4 (bench/coldstart,
// bench/RESULTS.md).
//
// The shop, "Fernhollow Home & Garden", sells 30 kinds of goods (six
// departments of five categories) in six styles and ten materials. A
// visitor comes with an intent (a category, usually a style) and clicks
// through items of that category, now and then through an item's
// complements (a pot leads to its saucer: a directed, sequential pattern),
// sometimes over to a related category or anywhere in the shop. Items
// differ in appeal. So clicks carry three kinds of signal: co-visitation
// inside a category, order along complements, and content (an item's
// category, style, material and title words predict whom it interests).
//
// Three cold-start cases are built in:
//
//   - New items: besides the opening catalogue, items launch every day in
//     the middle of the stream, each with its catalogue record published at
//     launch; a new item draws extra interest for its first days, so
//     queries whose answer is an item with no clicks yet are frequent.
//   - New visitors: every session is anonymous and short (about five
//     clicks).
//   - New system: a second site, another market, opens later with no
//     history. It sells most of the first site's items under ids of its
//     own (mapped through an id map) plus some local items, and its
//     visitors follow the same complements but weigh items and styles
//     somewhat differently, so the first site's statistics are a useful
//     but imperfect prior.
//
// Output, in the folder given by --out:
//
//	site-a.events.jsonl.gz   click events of the first site (stream/FORMAT.md §1)
//	site-a.catalog.jsonl     its catalogue records, in publication order (§2)
//	site-b.events.jsonl.gz   click events of the second site
//	site-b.catalog.jsonl     its catalogue records
//	idmap.csv                from,to: first-site id → second-site id
//	scenario.json            the options and the counts of what was written
//
// A record's published time is when it takes effect; the catalogue files
// can go to a bus with `waymark send --items`. The same options and seed
// always write the same bytes.
//
//	go run ./bench/coldscenario --out /tmp/coldscenario
package main
