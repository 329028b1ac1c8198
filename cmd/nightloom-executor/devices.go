package main

// The devices over INDI, by the standard property names of INDI's device
// interfaces (telescope, CCD, filter wheel, focuser, dome, weather), as the
// simulators of Debian's indi-bin define them.

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"math"
	"time"

	"github.com/nightloom/nightloom/ephem"
	"github.com/nightloom/nightloom/internal/indi"
)

// siderealArcsecPerS is the sidereal tracking rate, 15.041067 arcsec of
// hour angle per second of time (Explanatory Supplement, 3rd ed., sect. 3.3:
// 1.00273790935 sidereal seconds per solar second).
const siderealArcsecPerS = 15.041067178669

type deviceNames struct {
	mount, ccd, wheel, focuser, dome, weather string
}

// devices drives the observatory's devices; in dry-run it reads them and
// logs what it would send.
type devices struct {
	c      *indi.Client
	names  deviceNames
	dryRun bool
	log    *slog.Logger
	// slots maps our filter names to wheel slots (1-based).
	slots map[string]int
}

func (d *devices) set(ctx context.Context, kind indi.Kind, dev, prop string, vals ...indi.Value) (indi.Property, error) {
	if dev == "" {
		return indi.Property{}, nil
	}
	if d.dryRun {
		d.log.Info("dry run: would set", "device", dev, "property", prop, "values", fmt.Sprint(vals))
		p, _ := d.c.Property(dev, prop)
		return p, nil
	}
	return d.c.SetAndWait(ctx, kind, dev, prop, vals...)
}

func on(name string) indi.Value  { return indi.Value{Name: name, On: true} }
func off(name string) indi.Value { return indi.Value{Name: name} }

// connect asks for every device's properties, connects the devices that
// are not connected and turns BLOBs on for the camera.
func (d *devices) connect(ctx context.Context) error {
	if err := d.c.GetProperties("", ""); err != nil {
		return err
	}
	if d.names.ccd != "" {
		if err := d.c.EnableBLOB(d.names.ccd, "", indi.BLOBAlso); err != nil {
			return err
		}
	}
	for _, dev := range []string{d.names.mount, d.names.ccd, d.names.wheel, d.names.focuser, d.names.dome, d.names.weather} {
		if dev == "" {
			continue
		}
		p, err := d.c.Wait(ctx, dev, "CONNECTION", nil)
		if err != nil {
			return fmt.Errorf("device %q: %w", dev, err)
		}
		if !p.IsOn("CONNECT") {
			// Connecting moves nothing; a dry run needs it to read the device.
			d.log.Info("connecting", "device", dev)
			if _, err := d.c.SetAndWait(ctx, indi.Switch, dev, "CONNECTION", on("CONNECT"), off("DISCONNECT")); err != nil {
				return fmt.Errorf("connecting %q: %w", dev, err)
			}
		}
	}
	// The properties of a freshly connected driver arrive after CONNECT.
	for _, need := range [][2]string{{d.names.mount, "EQUATORIAL_EOD_COORD"}, {d.names.mount, "TELESCOPE_PARK"},
		{d.names.ccd, "CCD_EXPOSURE"}, {d.names.wheel, "FILTER_SLOT"}, {d.names.focuser, "ABS_FOCUS_POSITION"},
		{d.names.dome, "DOME_SHUTTER"}, {d.names.weather, "WEATHER_STATUS"}} {
		if need[0] == "" {
			continue
		}
		if _, err := d.c.Wait(ctx, need[0], need[1], nil); err != nil {
			return fmt.Errorf("device %q has no %s: %w", need[0], need[1], err)
		}
	}
	if d.names.ccd != "" && !d.dryRun {
		// Frames come to this client, as FITS.
		if p, ok := d.c.Property(d.names.ccd, "UPLOAD_MODE"); ok && !p.IsOn("UPLOAD_CLIENT") {
			if _, err := d.c.SetAndWait(ctx, indi.Switch, d.names.ccd, "UPLOAD_MODE", on("UPLOAD_CLIENT"), off("UPLOAD_LOCAL"), off("UPLOAD_BOTH")); err != nil {
				return err
			}
		}
		if p, ok := d.c.Property(d.names.ccd, "CCD_TRANSFER_FORMAT"); ok && !p.IsOn("FORMAT_FITS") {
			if _, err := d.c.SetAndWait(ctx, indi.Switch, d.names.ccd, "CCD_TRANSFER_FORMAT", on("FORMAT_FITS"), off("FORMAT_NATIVE")); err != nil {
				return err
			}
		}
	}
	return nil
}

// setSite tells the mount where it stands (INDI longitude: 0..360 east).
func (d *devices) setSite(ctx context.Context, latDeg, lonDeg, elevM float64) error {
	p, ok := d.c.Property(d.names.mount, "GEOGRAPHIC_COORD")
	lon := math.Mod(lonDeg+360, 360)
	if !ok || (math.Abs(p.Num("LAT")-latDeg) < 1e-4 && math.Abs(math.Remainder(p.Num("LONG")-lon, 360)) < 1e-4) {
		return nil
	}
	_, err := d.set(ctx, indi.Number, d.names.mount, "GEOGRAPHIC_COORD",
		indi.Value{Name: "LAT", Number: latDeg}, indi.Value{Name: "LONG", Number: lon}, indi.Value{Name: "ELEV", Number: elevM})
	return err
}

// mountPosition returns the mount's apparent place of date (RA and Dec in
// degrees) as it reports it.
func (d *devices) mountPosition() (raDeg, decDeg float64, ok bool) {
	p, ok := d.c.Property(d.names.mount, "EQUATORIAL_EOD_COORD")
	if !ok {
		return 0, 0, false
	}
	return p.Num("RA") * 15, p.Num("DEC"), true
}

func (d *devices) mountParked() bool {
	p, ok := d.c.Property(d.names.mount, "TELESCOPE_PARK")
	return ok && p.IsOn("PARK")
}

func (d *devices) unparkMount(ctx context.Context) error {
	if !d.mountParked() {
		return nil
	}
	_, err := d.set(ctx, indi.Switch, d.names.mount, "TELESCOPE_PARK", off("PARK"), on("UNPARK"))
	return err
}

func (d *devices) parkMount(ctx context.Context) error {
	if d.mountParked() {
		return nil
	}
	_, err := d.set(ctx, indi.Switch, d.names.mount, "TELESCOPE_PARK", on("PARK"), off("UNPARK"))
	return err
}

// domeOpen reports whether the shutter is open (true without a dome).
func (d *devices) domeOpen() bool {
	if d.names.dome == "" {
		return true
	}
	p, ok := d.c.Property(d.names.dome, "DOME_SHUTTER")
	return ok && p.IsOn("SHUTTER_OPEN") && p.State == indi.Ok
}

func (d *devices) openDome(ctx context.Context) error {
	if d.names.dome == "" || d.domeOpen() {
		return nil
	}
	if p, ok := d.c.Property(d.names.dome, "DOME_PARK"); ok && p.IsOn("PARK") {
		if _, err := d.set(ctx, indi.Switch, d.names.dome, "DOME_PARK", off("PARK"), on("UNPARK")); err != nil {
			return err
		}
	}
	_, err := d.set(ctx, indi.Switch, d.names.dome, "DOME_SHUTTER", on("SHUTTER_OPEN"), off("SHUTTER_CLOSE"))
	return err
}

// domeClosed reports whether the shutter is closed (true without a dome).
func (d *devices) domeClosed() bool {
	if d.names.dome == "" {
		return true
	}
	p, ok := d.c.Property(d.names.dome, "DOME_SHUTTER")
	return ok && p.IsOn("SHUTTER_CLOSE") && p.State == indi.Ok
}

func (d *devices) closeDome(ctx context.Context) error {
	if d.names.dome == "" {
		return nil
	}
	if !d.domeClosed() {
		if _, err := d.set(ctx, indi.Switch, d.names.dome, "DOME_SHUTTER", off("SHUTTER_OPEN"), on("SHUTTER_CLOSE")); err != nil {
			return err
		}
	}
	if p, ok := d.c.Property(d.names.dome, "DOME_PARK"); ok && !p.IsOn("PARK") {
		if _, err := d.set(ctx, indi.Switch, d.names.dome, "DOME_PARK", on("PARK"), off("UNPARK")); err != nil {
			return err
		}
	}
	return nil
}

// secure closes the dome and parks the mount at the same time, and returns
// when both are done (the first error otherwise).
func (d *devices) secure(ctx context.Context) error {
	errs := make(chan error, 2)
	go func() { errs <- d.closeDome(ctx) }()
	go func() { errs <- d.parkMount(ctx) }()
	return errors.Join(<-errs, <-errs)
}

// setTracking sets sidereal tracking, or custom rates for a moving target
// whose apparent place changes by dRA*cos(Dec) and dDec arcsec per minute.
func (d *devices) setTracking(ctx context.Context, nonSidereal bool, raCosDecPerMin, decPerMin, decDeg float64) error {
	if _, ok := d.c.Property(d.names.mount, "TELESCOPE_TRACK_MODE"); !ok {
		return nil
	}
	if !nonSidereal {
		_, err := d.set(ctx, indi.Switch, d.names.mount, "TELESCOPE_TRACK_MODE", on("TRACK_SIDEREAL"),
			off("TRACK_SOLAR"), off("TRACK_LUNAR"), off("TRACK_CUSTOM"))
		return err
	}
	// The RA axis turns at the sidereal rate less the target's own eastward
	// motion in right ascension (arcsec of RA per second of time).
	dRA := 0.0
	if c := math.Cos(decDeg * deg); c > 1e-6 {
		dRA = raCosDecPerMin / c / 60
	}
	if _, err := d.set(ctx, indi.Number, d.names.mount, "TELESCOPE_TRACK_RATE",
		indi.Value{Name: "TRACK_RATE_RA", Number: siderealArcsecPerS - dRA},
		indi.Value{Name: "TRACK_RATE_DE", Number: decPerMin / 60}); err != nil {
		return err
	}
	_, err := d.set(ctx, indi.Switch, d.names.mount, "TELESCOPE_TRACK_MODE", off("TRACK_SIDEREAL"),
		off("TRACK_SOLAR"), off("TRACK_LUNAR"), on("TRACK_CUSTOM"))
	return err
}

// gotoToleranceDeg is how far the mount may stand from the place it
// was sent to before the goto is repeated (20 arcsec: a fraction of a
// typical field; common practice, no source).
const gotoToleranceDeg = 20.0 / 3600

// slew points the mount at an apparent place of date, tracking, and returns
// when the mount reports the slew done and stands within
// gotoToleranceDeg of the place (the goto is repeated up to twice).
func (d *devices) slew(ctx context.Context, raDeg, decDeg float64) (offDeg float64, err error) {
	if _, err := d.set(ctx, indi.Switch, d.names.mount, "ON_COORD_SET", on("TRACK"), off("SLEW"), off("SYNC")); err != nil {
		return 0, err
	}
	for attempt := 0; attempt < 3; attempt++ {
		if _, err := d.set(ctx, indi.Number, d.names.mount, "EQUATORIAL_EOD_COORD",
			indi.Value{Name: "RA", Number: raDeg / 15}, indi.Value{Name: "DEC", Number: decDeg}); err != nil {
			return 0, err
		}
		if p, ok := d.c.Property(d.names.mount, "TELESCOPE_TRACK_STATE"); ok && !p.IsOn("TRACK_ON") {
			if _, err := d.set(ctx, indi.Switch, d.names.mount, "TELESCOPE_TRACK_STATE", on("TRACK_ON"), off("TRACK_OFF")); err != nil {
				return 0, err
			}
		}
		if d.dryRun {
			return 0, nil
		}
		ra, dec, _ := d.mountPosition()
		offDeg = ephem.Separation(ephem.SphericalToVec(ra*deg, dec*deg), ephem.SphericalToVec(raDeg*deg, decDeg*deg)) / deg
		if offDeg <= gotoToleranceDeg {
			return offDeg, nil
		}
		d.log.Warn("mount off its target after the goto; repeating", "off_arcsec", offDeg*3600)
	}
	return offDeg, fmt.Errorf("mount stands %.1f arcsec from its target after three gotos", offDeg*3600)
}

// filterSlot returns the slot in the beam and our name for it ("" when the
// slot is not in the map).
func (d *devices) filterInBeam() (slot int, name string) {
	if d.names.wheel == "" {
		return 0, ""
	}
	p, ok := d.c.Property(d.names.wheel, "FILTER_SLOT")
	if !ok {
		return 0, ""
	}
	slot = int(math.Round(p.Num("FILTER_SLOT_VALUE")))
	for n, s := range d.slots {
		if s == slot {
			return slot, n
		}
	}
	return slot, ""
}

func (d *devices) setFilter(ctx context.Context, name string) error {
	if d.names.wheel == "" || name == "" {
		return nil
	}
	slot, ok := d.slots[name]
	if !ok {
		return fmt.Errorf("filter %q is not in --filters", name)
	}
	if cur, _ := d.filterInBeam(); cur == slot {
		return nil
	}
	_, err := d.set(ctx, indi.Number, d.names.wheel, "FILTER_SLOT", indi.Value{Name: "FILTER_SLOT_VALUE", Number: float64(slot)})
	return err
}

// focusRun moves the focuser out by steps and back: the moment and the time
// of a focus run are real, the search for best focus is out of scope.
func (d *devices) focusRun(ctx context.Context, steps float64) error {
	if d.names.focuser == "" {
		return nil
	}
	p, ok := d.c.Property(d.names.focuser, "ABS_FOCUS_POSITION")
	if !ok {
		return fmt.Errorf("focuser %q has no ABS_FOCUS_POSITION", d.names.focuser)
	}
	pos := p.Num("FOCUS_ABSOLUTE_POSITION")
	e, _ := p.Element("FOCUS_ABSOLUTE_POSITION")
	out := pos + steps
	if e.Max > e.Min && out > e.Max {
		out = pos - steps
	}
	for _, to := range []float64{out, pos} {
		if _, err := d.set(ctx, indi.Number, d.names.focuser, "ABS_FOCUS_POSITION", indi.Value{Name: "FOCUS_ABSOLUTE_POSITION", Number: to}); err != nil {
			return err
		}
	}
	return nil
}

// weatherSafe reports whether the weather device says Ok (or Busy, its
// warning) and is reachable; without a weather device it is always safe.
func (d *devices) weatherSafe() (bool, string) {
	if d.names.weather == "" {
		return true, "no weather device"
	}
	if !d.c.Connected() {
		return false, "connection to the INDI server lost"
	}
	if p, ok := d.c.Property(d.names.weather, "CONNECTION"); ok && !p.IsOn("CONNECT") {
		return false, "weather device disconnected"
	}
	p, ok := d.c.Property(d.names.weather, "WEATHER_STATUS")
	if !ok {
		return false, "weather device has no WEATHER_STATUS"
	}
	if p.State == indi.Alert {
		return false, "weather Alert"
	}
	return true, "weather " + p.State.String()
}

// startExposure starts one exposure of exp.
func (d *devices) startExposure(exp time.Duration) error {
	if d.dryRun {
		d.log.Info("dry run: would expose", "device", d.names.ccd, "exposure_s", exp.Seconds())
		return nil
	}
	return d.c.Set(indi.Number, d.names.ccd, "CCD_EXPOSURE", indi.Value{Name: "CCD_EXPOSURE_VALUE", Number: exp.Seconds()})
}

func (d *devices) abortExposure() error {
	if d.dryRun || d.names.ccd == "" {
		return nil
	}
	return d.c.Set(indi.Switch, d.names.ccd, "CCD_ABORT_EXPOSURE", on("ABORT"))
}
