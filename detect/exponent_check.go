package detect

import "drainsight/model"

// exponentRecent is how many of the newest monitored drains join the
// baseline drains in the exponent reference.
const exponentRecent = 20

// ExponentCheck is the reference a new drain's exponent is checked against
// for unmetered inflow (model.InflowSuspected): the median exponent of the
// baseline drains and the newest monitored ones, with the tight allowance
// once a baseline is set (model.ExponentCheckBaseline) and the wider one
// from three drains on before that (model.ExponentCheckRecent). With fewer
// With a baseline of the tank's own drains it also passes the baseline K
// for the K-drop test. With fewer
// than three drains carrying an exponent it checks nothing: the tank's
// outlet may be one whose exponent is not 1/2 (a long tube, a valve in
// transitional flow), and only its own drains can tell.
func (s *State) ExponentCheck() model.ExponentCheck {
	var ns []float64
	for _, p := range s.Learn {
		if p.Exp != 0 {
			ns = append(ns, p.Exp)
		}
	}
	for _, p := range s.Points[max(0, len(s.Points)-exponentRecent):] {
		if p.Exp != 0 {
			ns = append(ns, p.Exp)
		}
	}
	if len(ns) < 3 {
		return model.ExponentCheck{}
	}
	c := model.ExponentCheckRecent
	if s.Ref.Set && len(ns) >= 5 {
		c = model.ExponentCheckBaseline
		if !s.Ref.Design {
			c.RefLnK, c.TauLnK = s.Ref.LnK, s.Ref.Tau
			c.KExponent, c.KHRefM = s.Ref.Exponent, s.Ref.HRefM
		}
	}
	c.RefExponent = median(ns)
	return c
}
