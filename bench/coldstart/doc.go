// Command coldstart runs the cold-start comparisons of issue 4 and prints
// the tables of bench/RESULTS.md. It drives the project's own
// code: the replay evaluator (models/eval) and the serve engine
// (session.Engine); it scores nothing with a model of its own.
//
// It exists because `waymark replay` cannot yet do three things these
// comparisons need (each is named as a missing flag in the results file):
// read catalogue records from a file of their own (replay applies only the
// records a dataset reader or a stream range carries), start from imported
// priors, and give fresh items exploration slots with impressions recorded
// (serve does this in session.Engine.Next; replay asks the models alone).
//
// Subcommands:
//
//	replay        the replay evaluator (eval.Load + eval.Run, as `waymark
//	              replay` calls them, prequential) on event files plus
//	              --catalog-file records, applied at their published time
//	export-priors learn a log up to --until in a serve engine and write its
//	              priors export, as GET /v1/admin/priors writes it
//	serve         replay a log through a serve engine, test then learn:
//	              catalogue records on the catalogue subject, imported
//	              priors (--priors, --map, --weight, as `waymark priors
//	              import` maps them) and served fresh items on the control
//	              subject, queries by Engine.Next; reports HitRate@K
//	              overall, on cold targets, and per block of hours or
//	              events since the log's first click
//	table         turn serve's JSON results into a Markdown table
//	eshop-split   split the e-shop file into two markets by visitor
//	              country, the second opening on a given date
//
// bench/coldstart/run.sh holds every command of the results file.
package main
