package server

// Accessors for in-process readers such as the web pages (internal/web),
// which do their own authentication and must not go through gRPC.

import (
	"net/http"

	"github.com/prometheus/client_golang/prometheus/promhttp"

	nightloomv1 "github.com/nightloom/nightloom/proto/nightloom/v1"
)

// SubscribePlans follows the new plan versions of a site through the same
// hub as WatchPlans, with the same limits. versions receives each version
// stored after the call; ended is closed when the hub cuts the subscriber
// off (it fell behind, or the daemon shuts down). Call cancel when done.
func (s *Server) SubscribePlans(siteID string) (versions <-chan *nightloomv1.Plan, ended <-chan struct{}, cancel func(), err error) {
	w, err := s.hub.subscribe(siteID)
	if err != nil {
		return nil, nil, nil, err
	}
	return w.ch, w.end, func() { s.hub.unsubscribe(w) }, nil
}

// Sky is the SkyService implementation for in-process callers that have
// authorized the caller themselves (no interceptors run: errors are the
// store's and the validators' own).
func (s *Server) Sky() nightloomv1.SkyServiceServer { return &skyService{s: s} }

// MetricsHandler serves the daemon's Prometheus metrics (the registry the
// --metrics-addr listener serves), for another listener such as the web
// pages'.
func (s *Server) MetricsHandler() http.Handler {
	return promhttp.HandlerFor(s.metrics.reg, promhttp.HandlerOpts{})
}
