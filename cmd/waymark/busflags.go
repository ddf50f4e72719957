package main

import (
	"flag"
	"os"

	"waymark/stream"
)

// busFlags are the NATS connection flags shared by every subcommand that
// talks to the bus (serve, send, replay, priors import), so they all take
// the same credentials and TLS settings under the same names. An empty flag
// falls back to its environment variable (WAYMARK_NATS_TOKEN for
// --nats-token, ...); the secrets are better given that way than on a
// command line other users can read in the process list. With none given,
// stream.Connect uses the credentials an embedded server on this machine
// recorded for the URL's address (stream.DefaultCredentialsDir).
type busFlags struct {
	url, creds, token, user, password, nkey string
	tlsCA, tlsCert, tlsKey                  string
}

// busSecretFlags are the flags serve's effective-config log line redacts.
var busSecretFlags = []string{"nats-creds", "nats-token", "nats-password", "nats-nkey", "nats-tls-key"}

// addBusFlags registers the connection flags on fs; defaultURL and urlUsage
// describe --nats, which differs between commands.
func addBusFlags(fs *flag.FlagSet, defaultURL, urlUsage string) *busFlags {
	b := &busFlags{}
	fs.StringVar(&b.url, "nats", defaultURL, urlUsage)
	fs.StringVar(&b.creds, "nats-creds", "", "NATS credentials `file` (JWT and nkey seed) [$WAYMARK_NATS_CREDS]")
	fs.StringVar(&b.token, "nats-token", "", "NATS authentication `token` [$WAYMARK_NATS_TOKEN]")
	fs.StringVar(&b.user, "nats-user", "", "NATS `user` [$WAYMARK_NATS_USER]")
	fs.StringVar(&b.password, "nats-password", "", "NATS `password` of --nats-user [$WAYMARK_NATS_PASSWORD]")
	fs.StringVar(&b.nkey, "nats-nkey", "", "NATS nkey seed `file` [$WAYMARK_NATS_NKEY]")
	fs.StringVar(&b.tlsCA, "nats-tls-ca", "", "CA `file` to verify the NATS server's certificate [$WAYMARK_NATS_TLS_CA]")
	fs.StringVar(&b.tlsCert, "nats-tls-cert", "", "client TLS certificate `file` for NATS [$WAYMARK_NATS_TLS_CERT]")
	fs.StringVar(&b.tlsKey, "nats-tls-key", "", "client TLS key `file` for NATS [$WAYMARK_NATS_TLS_KEY]")
	return b
}

// apply sets o's URL, credentials and TLS files from the flags, each empty
// flag from its environment variable.
func (b *busFlags) apply(o *stream.BusOptions) {
	env := func(v, name string) string {
		if v != "" {
			return v
		}
		return os.Getenv(name)
	}
	o.URL = b.url
	o.CredsFile = env(b.creds, "WAYMARK_NATS_CREDS")
	o.Token = env(b.token, "WAYMARK_NATS_TOKEN")
	o.User = env(b.user, "WAYMARK_NATS_USER")
	o.Password = env(b.password, "WAYMARK_NATS_PASSWORD")
	o.NkeySeedFile = env(b.nkey, "WAYMARK_NATS_NKEY")
	o.TLSCA = env(b.tlsCA, "WAYMARK_NATS_TLS_CA")
	o.TLSCert = env(b.tlsCert, "WAYMARK_NATS_TLS_CERT")
	o.TLSKey = env(b.tlsKey, "WAYMARK_NATS_TLS_KEY")
}

// listenFlags are serve's settings of the embedded server's client port.
type listenFlags struct {
	password, tlsCert, tlsKey, tlsClientCA string
}

// listenSecretFlags are the listen flags serve's log line redacts.
var listenSecretFlags = []string{"nats-listen-password", "nats-listen-tls-key"}

func addListenFlags(fs *flag.FlagSet) *listenFlags {
	l := &listenFlags{}
	fs.StringVar(&l.password, "nats-listen-password", "", "`password` of user "+stream.DefaultServerUser+" on the embedded NATS server (empty: generated into <data>/nats/bus-password); better from $WAYMARK_NATS_LISTEN_PASSWORD")
	fs.StringVar(&l.tlsCert, "nats-listen-tls-cert", "", "server TLS certificate `file`: the embedded NATS server then requires TLS")
	fs.StringVar(&l.tlsKey, "nats-listen-tls-key", "", "server TLS key `file` of --nats-listen-tls-cert")
	fs.StringVar(&l.tlsClientCA, "nats-listen-tls-client-ca", "", "CA `file`: the embedded NATS server then also requires client certificates signed by it")
	return l
}

// apply sets the embedded server's password and TLS files.
func (l *listenFlags) apply(a *stream.ServerAuth) {
	a.Password = l.password
	a.TLSCert, a.TLSKey, a.TLSClientCA = l.tlsCert, l.tlsKey, l.tlsClientCA
}
