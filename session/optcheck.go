package session

import (
	"fmt"

	"waymark/models"
)

// checkEngineOptions runs the checks NewEngine runs on its options and
// builds their models once, unlearned, so that Open reports a bad option
// or a mistyped model spec before it creates the data folder or starts the
// embedded NATS server: a wrong flag should leave nothing behind.
func checkEngineOptions(o EngineOptions) error {
	if err := o.validate(); err != nil {
		return err
	}
	p, err := NewPipeline(o.Pipeline)
	if err != nil {
		return err
	}
	if m, _ := p.Set.Get(o.Blend); !isBlend(m) {
		return fmt.Errorf("%w: Blend %q is not a blend", ErrBadOption, o.Blend)
	}
	if o.ExploreShare > 0 {
		if m, _ := p.Set.Get(o.Fresh); !isFresh(m) {
			return fmt.Errorf("%w: Fresh %q is not a fresh-item model", ErrBadOption, o.Fresh)
		}
	}
	return nil
}

func isBlend(m models.Model) bool { _, ok := m.(*models.Blend); return ok }
func isFresh(m models.Model) bool { _, ok := m.(*models.Fresh); return ok }
