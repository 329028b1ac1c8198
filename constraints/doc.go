// Package constraints evaluates observing conditions on a night's time grid:
// the Sun and Moon state once per step, then for every target its
// altitude, azimuth, airmass, hour angle, separations, sky brightness and
// (for orbit targets) magnitude and motion, and for every imaging block a
// feasibility mask with the first failing constraint, a quality factor and
// the contiguous windows.
//
// # Quality
//
// The quality of a feasible step is the fraction of the signal-to-noise
// rate that a background-limited exposure would have at the zenith under
// the site's darkest sky:
//
//	q = 10^(-0.8 k) * X^(-1.2) * 10^(-0.4 (m_dark - m_sky))
//
// with k the site's V extinction (mag per airmass), X the airmass (Kasten &
// Young 1989), m_dark the site's dark zenith sky brightness and m_sky the
// predicted sky brightness at the target (both V mag/arcsec^2). The first
// factor is the signal lost to extinction (S/N^2 scales as S^2/B); the
// second the larger seeing disc (FWHM ~ X^0.6, Roddier 1981, Progress in
// Optics 19, 281, so the sky in the aperture grows as X^1.2); the third the
// brighter sky. q is clipped to [1e-4, 1]. One exposure second at quality q
// is worth q seconds at the zenith in a dark sky. Grids built without sky
// brightness (Options.NoSkyBrightness) drop the third factor.
//
// # Reasons
//
// Every infeasible step carries the first failing constraint in the order
// of the Reason constants, so a user can be told "Moon too close from 23:10
// to 01:40; below the horizon profile after 03:05" (Visibility.Spans).
package constraints
