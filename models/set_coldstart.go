package models

// registerColdStart adds the cold-start models' builders to the set.
func (s *Set) registerColdStart() {}
