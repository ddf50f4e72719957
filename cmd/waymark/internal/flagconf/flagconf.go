// Package flagconf layers configuration for a flag set: a flag given on the
// command line wins, then an environment variable, then a key of the config
// file, then the flag's default.
package flagconf

import (
	"encoding/json"
	"errors"
	"flag"
	"fmt"
	"os"
	"sort"
	"strings"
)

// ErrUnknownKey reports a config-file key that names no flag.
var ErrUnknownKey = errors.New("flagconf: unknown key")

// EnvName returns the environment variable for flag name: prefix, then the
// name upper-cased with '-' as '_' (for example WAYMARK_HALF_LIFE).
func EnvName(prefix, name string) string {
	return prefix + strings.ToUpper(strings.ReplaceAll(name, "-", "_"))
}

// Apply fills every flag of fs that the command line did not set from the
// environment (lookup, usually os.LookupEnv) and then from the JSON object
// in configFile (when not empty), whose keys are flag names.
func Apply(fs *flag.FlagSet, envPrefix, configFile string, lookup func(string) (string, bool)) error {
	set := map[string]bool{}
	fs.Visit(func(f *flag.Flag) { set[f.Name] = true })
	var file map[string]any
	if configFile != "" {
		b, err := os.ReadFile(configFile)
		if err != nil {
			return fmt.Errorf("config file: %w", err)
		}
		if err := json.Unmarshal(b, &file); err != nil {
			return fmt.Errorf("config file %s: %w", configFile, err)
		}
		keys := make([]string, 0, len(file))
		for k := range file {
			keys = append(keys, k)
		}
		sort.Strings(keys)
		for _, k := range keys {
			if fs.Lookup(k) == nil {
				return fmt.Errorf("config file %s: %w %q", configFile, ErrUnknownKey, k)
			}
		}
	}
	var err error
	fs.VisitAll(func(f *flag.Flag) {
		if err != nil || set[f.Name] {
			return
		}
		if v, ok := lookup(EnvName(envPrefix, f.Name)); ok {
			if e := fs.Set(f.Name, v); e != nil {
				err = fmt.Errorf("environment %s: %w", EnvName(envPrefix, f.Name), e)
			}
			return
		}
		if v, ok := file[f.Name]; ok {
			s := fmt.Sprint(v)
			if n, isNum := v.(float64); isNum && n == float64(int64(n)) {
				s = fmt.Sprint(int64(n))
			}
			if e := fs.Set(f.Name, s); e != nil {
				err = fmt.Errorf("config file key %q: %w", f.Name, e)
			}
		}
	})
	return err
}

// Effective returns every flag's value, with the values of flags named in
// secret replaced by "<redacted>" when set, for printing at start.
func Effective(fs *flag.FlagSet, secret ...string) map[string]string {
	out := map[string]string{}
	fs.VisitAll(func(f *flag.Flag) {
		v := f.Value.String()
		for _, s := range secret {
			if f.Name == s && v != "" {
				v = "<redacted>"
			}
		}
		out[f.Name] = v
	})
	return out
}
