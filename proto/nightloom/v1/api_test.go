package nightloomv1_test

// Checks of the API's own conventions (DESIGN.md, "Conventions that other
// parts rely on") that buf lint cannot see: unit suffixes, time types,
// paging fields, and the service and RPC names fixed by issue 5. They read
// the descriptors compiled into the generated code, so they test what
// clients get.

import (
	"slices"
	"sort"
	"strings"
	"testing"

	"google.golang.org/protobuf/reflect/protoreflect"
	"google.golang.org/protobuf/reflect/protoregistry"

	_ "github.com/nightloom/nightloom/proto/nightloom/v1"
)

const apiPackage = "nightloom.v1"

// apiFiles returns the descriptors of every file of package nightloom.v1.
func apiFiles(t *testing.T) []protoreflect.FileDescriptor {
	t.Helper()
	var files []protoreflect.FileDescriptor
	protoregistry.GlobalFiles.RangeFilesByPackage(apiPackage, func(fd protoreflect.FileDescriptor) bool {
		files = append(files, fd)
		return true
	})
	if len(files) == 0 {
		t.Fatalf("no files registered for package %s", apiPackage)
	}
	return files
}

// apiMessages returns every message of the API, nested ones included.
func apiMessages(t *testing.T) []protoreflect.MessageDescriptor {
	var out []protoreflect.MessageDescriptor
	var walk func(protoreflect.MessageDescriptors)
	walk = func(ms protoreflect.MessageDescriptors) {
		for i := 0; i < ms.Len(); i++ {
			out = append(out, ms.Get(i))
			walk(ms.Get(i).Messages())
		}
	}
	for _, fd := range apiFiles(t) {
		walk(fd.Messages())
	}
	return out
}

// unitSuffixes are the units a floating-point field may carry in its name
// (DESIGN.md: angles in degrees, distances with their unit in the name).
var unitSuffixes = []string{
	"_deg", "_au", "_km", "_m", "_mm", // angles and distances (apertures in mm)
	"_deg_per_s", "_deg_per_s2", "_arcsec_per_min", "_mas_per_yr", // rates
	"_arcsec", "_px", // image scale, trailing
	"_hpa", "_c", // pressure, temperature
	"_v_mag_arcsec2", // surface brightness
	"_julian_year",   // epoch
}

// dimensionless are floating-point fields that have no unit: ratios,
// magnitudes, orbit shape, scores.
var dimensionless = []string{
	"airmass", "max_airmass", "min_airmass",
	"eccentricity",
	"moon_illumination", "max_moon_illumination",
	"quality", "best_quality", "mean_quality",
	"magnitude", "observed_magnitude", "faintest_magnitude",
	"m1", "k1", "h", "g",
	"extinction_v",
	"total", "weighted_exposure", "completion_bonus", "cadence_points",
	// the network objective of a joint plan and of its separate start (scores)
	"objective", "separate_objective",
	// magnitudes of a comet's light curve and the statistics of their fit
	"fitted_magnitude", "prior_magnitude", "sigma_mag", "sigma_m1", "sigma_k1", "covariance_m1_k1", "chi2",
	// a program's fair-share factor (a ratio of weights)
	"fair_share",
}

// forbiddenSuffixes are units the API does not use: angles are degrees,
// times are Duration or Timestamp.
var forbiddenSuffixes = []string{
	"_rad", "_arcmin", "_ms", "_sec", "_seconds", "_min", "_minutes", "_hours", "_h", "_jd", "_mjd",
}

func TestFloatFieldsNameTheirUnit(t *testing.T) {
	for _, md := range apiMessages(t) {
		fields := md.Fields()
		for i := 0; i < fields.Len(); i++ {
			fd := fields.Get(i)
			name := string(fd.Name())
			if k := fd.Kind(); k != protoreflect.DoubleKind && k != protoreflect.FloatKind {
				continue
			}
			if slices.Contains(dimensionless, name) {
				continue
			}
			if !slices.ContainsFunc(unitSuffixes, func(s string) bool { return strings.HasSuffix(name, s) }) {
				t.Errorf("%s: floating-point field without a unit suffix (want one of %v, or add it to the dimensionless list with a reason)", fd.FullName(), unitSuffixes)
			}
		}
	}
}

func TestNoForbiddenUnits(t *testing.T) {
	for _, md := range apiMessages(t) {
		fields := md.Fields()
		for i := 0; i < fields.Len(); i++ {
			fd := fields.Get(i)
			for _, s := range forbiddenSuffixes {
				// A rate's time unit ("_per_min") is part of a unit, not a time.
				if name := string(fd.Name()); strings.HasSuffix(name, s) && !strings.HasSuffix(name, "_per"+s) {
					t.Errorf("%s: unit suffix %q; use degrees, google.protobuf.Duration or google.protobuf.Timestamp", fd.FullName(), s)
				}
			}
		}
	}
}

const (
	timestampType protoreflect.FullName = "google.protobuf.Timestamp"
	durationType  protoreflect.FullName = "google.protobuf.Duration"
)

// durationTimes are the fields named "..._time" that are lengths of time,
// not instants.
var durationTimes = []string{"exposure_time", "overhead_time", "idle_time", "visible_time", "solve_time"}

// Durations and instants use the well-known types; a field whose name says
// it is a time must have one of them, and a Duration carries no unit suffix.
func TestTimesUseWellKnownTypes(t *testing.T) {
	for _, md := range apiMessages(t) {
		fields := md.Fields()
		for i := 0; i < fields.Len(); i++ {
			fd := fields.Get(i)
			name := string(fd.Name())
			var msgName protoreflect.FullName
			if fd.Kind() == protoreflect.MessageKind {
				msgName = fd.Message().FullName()
			}
			switch {
			case strings.HasSuffix(name, "_tt"):
				if msgName != timestampType {
					t.Errorf("%s: a _tt field must be a Timestamp read as TT, got %v %s", fd.FullName(), fd.Kind(), msgName)
				}
			case slices.Contains(durationTimes, name):
				if msgName != durationType {
					t.Errorf("%s: a length of time must be a Duration, got %v %s", fd.FullName(), fd.Kind(), msgName)
				}
			case name == "time" || strings.HasSuffix(name, "_time"):
				if msgName != timestampType {
					t.Errorf("%s: an instant must be a Timestamp, got %v %s", fd.FullName(), fd.Kind(), msgName)
				}
			}
			if msgName == durationType && strings.HasSuffix(name, "_s") {
				t.Errorf("%s: a Duration carries its own unit; drop the _s suffix", fd.FullName())
			}
		}
	}
}

// Every List RPC pages the same way (common.proto's conventions).
func TestListCallsPage(t *testing.T) {
	n := 0
	for _, fd := range apiFiles(t) {
		svcs := fd.Services()
		for i := 0; i < svcs.Len(); i++ {
			methods := svcs.Get(i).Methods()
			for j := 0; j < methods.Len(); j++ {
				m := methods.Get(j)
				if !strings.HasPrefix(string(m.Name()), "List") {
					continue
				}
				n++
				in, out := m.Input().Fields(), m.Output().Fields()
				if f := in.ByName("page_size"); f == nil || f.Kind() != protoreflect.Int32Kind {
					t.Errorf("%s: request lacks int32 page_size", m.FullName())
				}
				if f := in.ByName("page_token"); f == nil || f.Kind() != protoreflect.StringKind {
					t.Errorf("%s: request lacks string page_token", m.FullName())
				}
				if f := out.ByName("next_page_token"); f == nil || f.Kind() != protoreflect.StringKind {
					t.Errorf("%s: response lacks string next_page_token", m.FullName())
				}
			}
		}
	}
	if n != 6 {
		t.Errorf("found %d List RPCs, want 6 (sites, targets, blocks, plans, programs, networks)", n)
	}
}

// The service and RPC names are fixed by issue 5; other parts (auth role
// tables, the client, tests that iterate over the descriptors) rely on them.
func TestServicesAndRPCs(t *testing.T) {
	want := map[string][]string{
		"SiteService":       {"CreateSite", "DeleteSite", "GetSite", "ListSites", "UpdateSite"},
		"TargetService":     {"CreateTarget", "DeleteTarget", "GetTarget", "ImportElements", "ListTargets", "UpdateTarget"},
		"QueueService":      {"GetBlock", "ListBlocks", "QueueBlocks", "ReportProgress", "UpdateBlock", "WithdrawBlock", "WithdrawBlocks"},
		"ExportService":     {"ExportPlan"},
		"PlanService":       {"GetPlan", "ListPlans", "MakePlan", "NextAssignment", "Replan", "WatchPlans"},
		"SkyService":        {"Ephemeris", "Night", "Visibility"},
		"ApparitionService": {"MagnitudeHistory", "Outlook", "RefitMagnitudeLaw", "ReportMagnitudes"},
		"CatalogueService":  {"LookupName", "SearchCatalogue"},
		"ProgramService":    {"CreateProgram", "DeleteProgram", "GetProgram", "GetProgramUsage", "ListPrograms", "UpdateProgram"},
		"NetworkService":    {"CreateNetwork", "DeleteNetwork", "GetNetwork", "ListNetworks", "MakeNetworkPlan", "ReplanNetwork"},
	}
	got := map[string][]string{}
	for _, fd := range apiFiles(t) {
		svcs := fd.Services()
		for i := 0; i < svcs.Len(); i++ {
			s := svcs.Get(i)
			var names []string
			for j := 0; j < s.Methods().Len(); j++ {
				m := s.Methods().Get(j)
				names = append(names, string(m.Name()))
				streaming := m.IsStreamingServer() || m.IsStreamingClient()
				if wantStream := m.Name() == "WatchPlans"; streaming != wantStream || m.IsStreamingClient() {
					t.Errorf("%s: server streaming %v, client streaming %v; only WatchPlans streams, server to client",
						m.FullName(), m.IsStreamingServer(), m.IsStreamingClient())
				}
			}
			sort.Strings(names)
			got[string(s.Name())] = names
		}
	}
	for svc, rpcs := range want {
		if !slices.Equal(got[svc], rpcs) {
			t.Errorf("%s: RPCs %v, want %v", svc, got[svc], rpcs)
		}
	}
	for svc := range got {
		if _, ok := want[svc]; !ok {
			t.Errorf("unexpected service %s", svc)
		}
	}
}

// The API imports nothing but its own files and protobuf's well-known
// types (no registry dependencies are reachable when generating).
func TestImportsOnlyWellKnownTypes(t *testing.T) {
	for _, fd := range apiFiles(t) {
		imps := fd.Imports()
		for i := 0; i < imps.Len(); i++ {
			p := imps.Get(i).Path()
			if !strings.HasPrefix(p, "google/protobuf/") && !strings.HasPrefix(p, "nightloom/v1/") {
				t.Errorf("%s imports %s", fd.Path(), p)
			}
		}
	}
}
