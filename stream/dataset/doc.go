// Package dataset turns recorded click data into events for offline replay:
// the two open datasets the project checks itself against, and a bounded
// range of the JetStream events stream.
//
// # Open datasets
//
// NewMSNBCReader reads the MSNBC page-category sequences (UCI "MSNBC.com
// Anonymous Web Data", CC BY 4.0): one visitor session per line, category
// numbers in click order, no times. Each line becomes one session; clicks get
// synthetic, strictly increasing times (a fixed step apart, the first at
// Start) so a replay keeps the file's order, and each click's item is the
// category name from the file's header ("frontpage", "news", ...).
//
// NewEshopReader reads the e-shop clothing clickstream (UCI "Clickstream data
// for online shopping", CC BY 4.0): one row a click, with the session id, the
// clothing model code as the item, and the day. The day gives the date; the
// row's place among that day's rows (sessions in file order, clicks by their
// order column) gives the time within it, a fixed step apart. The product
// columns (main category, colour, photo location, photography, price, price
// against the category average, page) become catalogue-style attributes,
// returned by TakeItems and Items as stream.ItemRecord values.
//
// Open picks the reader for a file by its content (format "auto"), or by
// name: "msnbc", "eshop", or "events" for the project's own JSON lines and
// CSV (stream.OpenFile; the file name ending in .csv or .csv.gz decides),
// "csv" or "ndjson" for one of those whatever the file is called. Gzip is
// unwrapped by its magic bytes.
//
// # Stream ranges
//
// OpenRange reads a range of a JetStream stream, by stream sequence or by
// stored time, through an ordered consumer, and stops at the end of the range
// or at the last message the stream held when it was opened, so a replay of
// a live stream terminates. Click events come from Next; catalogue records
// met on the way come from TakeItems.
//
// Every reader here returns io.EOF at the end. A bad record comes back as a
// *stream.LineError (for a stream range, Line holds the stream sequence) and
// the next call goes on with the record after it.
package dataset
