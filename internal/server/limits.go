package server

import "time"

// Limits of the service. Each is documented in the .proto file of the call
// it bounds (proto/nightloom/v1); a request that exceeds one is refused with
// INVALID_ARGUMENT and a field violation naming the field, or, for the stream
// and message limits, RESOURCE_EXHAUSTED. They exist so that no single
// request can ask for unbounded memory, CPU or disk.
const (
	// DefaultMaxRecvBytes is the largest request message the daemon accepts
	// (flag --max-recv-bytes). 4 MiB holds 500 fully specified blocks with
	// room to spare; larger messages get RESOURCE_EXHAUSTED from gRPC.
	DefaultMaxRecvBytes = 4 << 20
	// MaxSendBytes bounds a response (an ephemeris of 10 000 rows is about
	// 2 MiB).
	MaxSendBytes = 16 << 20

	// MaxBlocksPerCall bounds QueueBlocks (queue.proto).
	MaxBlocksPerCall = 500
	// MaxQueuedBlocksPerSite bounds the queued (open or expired) blocks of
	// one site; QueueBlocks beyond it is RESOURCE_EXHAUSTED. Planning loads
	// them all (not yet in queue.proto).
	MaxQueuedBlocksPerSite = 20_000

	// MaxPlanNights bounds MakePlanRequest.nights (plan.proto).
	MaxPlanNights = 30
	// MaxLookaheadNights bounds MakePlanRequest.lookahead_nights.
	MaxLookaheadNights = 60
	// DefaultLookaheadNights is the lookahead when the request leaves it
	// unset.
	DefaultLookaheadNights = 14
	// MinPlanInterval and MaxPlanInterval bound an explicit planning or
	// visibility interval.
	MinPlanInterval = 10 * time.Minute
	MaxPlanInterval = 48 * time.Hour
	// MinGridStep, MaxGridStep and DefaultGridStep bound the constraint
	// grid of MakePlan, Replan and Visibility.
	MinGridStep     = 10 * time.Second
	MaxGridStep     = 10 * time.Minute
	DefaultGridStep = 60 * time.Second
	// MaxBlockSteps bounds open blocks times grid steps in one night's
	// planning problem (the memory of the visibility tables).
	MaxBlockSteps = 5_000_000
	// MaxTimeBudget bounds the solver's wall-time budget per call;
	// DefaultTimeBudget is used when the request leaves it unset. It is a
	// ceiling (the search also stops when it has converged): on the
	// 200-block night of BenchmarkPlanDefaults the constructive plan alone
	// is already 99.3-100 % of what a 5 s budget reaches and 150 ms of
	// search keeps every seed tried above 99.4 %, so the default favours
	// an answer within 300 ms (issue 15); ask for more per call or with
	// nightloomd --default-time-budget.
	MaxTimeBudget     = 60 * time.Second
	DefaultTimeBudget = 150 * time.Millisecond
	// DefaultReplanBudget is a Replan's (and an automatic replan's)
	// budget when the request sets none: a replan starts from the old plan
	// as its first incumbent, and on BenchmarkPlanDefaults' night 80 ms of
	// search reach 98.5-99.5 % of a 5 s replan, in about 120 ms a call.
	DefaultReplanBudget = 80 * time.Millisecond
	// MaxClosuresPerCall bounds the closures of one MakePlan or Replan
	// request; MaxClosuresPerPlan bounds those a plan carries after
	// replans have added theirs (overlapping closures are merged first).
	MaxClosuresPerCall = 100
	MaxClosuresPerPlan = 1000

	// MaxEphemerisRows bounds an Ephemeris table (sky.proto); its step is
	// MinEphemerisStep..MaxEphemerisStep and its interval at most
	// MaxEphemerisSpan.
	MaxEphemerisRows     = 10_000
	MinEphemerisStep     = time.Second
	MaxEphemerisStep     = 24 * time.Hour
	DefaultEphemerisStep = time.Hour
	MaxEphemerisSpan     = 366 * 24 * time.Hour

	// DefaultWatchBuffer is how many plan versions a watcher may fall
	// behind before it is cut off with RESOURCE_EXHAUSTED (plan.proto).
	DefaultWatchBuffer = 32
	// DefaultMaxWatchersPerSite bounds the WatchPlans streams of one site;
	// one more is refused with RESOURCE_EXHAUSTED.
	DefaultMaxWatchersPerSite = 100
	// MaxWatchersTotal bounds the WatchPlans streams of the daemon.
	MaxWatchersTotal = 2000
	// MaxConcurrentStreams bounds the streams of one HTTP/2 connection.
	MaxConcurrentStreams = 1000

	// DefaultReplanPriority is the block priority at or above which queuing
	// an open block replans the site's running plan (queue.proto).
	DefaultReplanPriority = 8

	// Page sizes (defaults and maxima of the List calls).
	DefaultPageSize      = 50
	MaxPageSize          = 500
	DefaultBlockPageSize = 100
	MaxBlockPageSize     = 1000

	// Field sizes.
	MaxIDBytes          = 64
	MaxNameBytes        = 100
	MaxLabelBytes       = 200
	MaxNoteBytes        = 500
	MaxReasonBytes      = 200
	MaxFilterBytes      = 32
	MaxFilters          = 32
	MaxHorizonPoints    = 720
	MaxReportIDBytes    = 128
	MaxRequestIDBytes   = 128
	MaxPageTokenBytes   = 1024
	MaxUpdateMaskPaths  = 64
	MaxFramesWanted     = 100_000
	MaxDitherEvery      = 10_000
	MaxListStateFilters = 8

	// Networks (network.proto).
	MaxNetworkSites        = 32     // members of one network
	MaxAllowedSites        = 64     // Block.allowed_site_ids
	MaxNetworkNights       = 14     // MakeNetworkPlanRequest.nights
	MaxDescriptionBytes    = 1000   // Network.description
	MaxApertureMM          = 20_000 // Instrument.aperture_mm, TelescopeNeeds.min_aperture_mm
	MaxNeedsPixelScaleArcs = 60     // TelescopeNeeds pixel scales, as Instrument.pixel_scale_arcsec
)
