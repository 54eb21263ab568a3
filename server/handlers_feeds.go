package server

import (
	"bytes"
	"context"
	"net/http"
	"strings"
	"time"

	"github.com/labstack/echo/v4"

	"beamledger"
	"beamledger/accounts"
	"beamledger/calendar"
	"beamledger/scheduling"
)

// feedTokenCreated carries the secret and the feed paths, shown this once.
type feedTokenCreated struct {
	accounts.FeedToken
	Token string `json:"token"`
	// MyBookings is the path of the feed of the user's own bookings; Instrument is the
	// path template of an instrument's feed.
	MyBookings string `json:"my_bookings"`
	Instrument string `json:"instrument"`
}

func (s *Server) handleFeedTokenCreate(c echo.Context) error {
	ctx := c.Request().Context()
	secret, hash, err := accounts.NewOpaqueToken(accounts.FeedTokenPrefix)
	if err != nil {
		return err
	}
	t, err := s.store.CreateFeedToken(ctx, principal(ctx).UserID, hash)
	if err != nil {
		return err
	}
	c.Response().Header().Set("Cache-Control", "no-store")
	return c.JSON(http.StatusCreated, feedTokenCreated{FeedToken: t, Token: secret,
		MyBookings: "/feeds/" + secret + "/mine.ics", Instrument: "/feeds/" + secret + "/instruments/{instrument_id}.ics"})
}

func (s *Server) handleFeedTokenList(c echo.Context) error {
	ctx := c.Request().Context()
	ts, err := s.store.FeedTokens(ctx, principal(ctx).UserID)
	if err != nil {
		return err
	}
	return c.JSON(http.StatusOK, listOf(ts))
}

func (s *Server) handleFeedTokenRevoke(c echo.Context) error {
	ctx := c.Request().Context()
	t, err := s.store.RevokeFeedToken(ctx, principal(ctx).UserID, c.Param("feed_token_id"), s.now())
	if err != nil {
		return err
	}
	return c.JSON(http.StatusOK, t)
}

// feedPrincipal resolves the token in a feed URL to the principal it reads as.
func (s *Server) feedPrincipal(ctx context.Context, token string) (accounts.Principal, error) {
	if accounts.TokenPrefix(token) != accounts.FeedTokenPrefix {
		return accounts.Principal{}, beamledger.NotFound("feed")
	}
	userID, err := s.store.FeedTokenUser(ctx, accounts.HashOpaqueToken(token))
	if err != nil {
		return accounts.Principal{}, err
	}
	st, err := s.store.AuthState(ctx, userID)
	if err != nil {
		return accounts.Principal{}, err
	}
	return accounts.Principal{UserID: userID, Role: st.Role}, nil
}

// feedWindow is the span a feed covers: a month back, half a year ahead.
func (s *Server) feedWindow() (time.Time, time.Time) {
	now := s.now()
	return now.AddDate(0, -1, 0), now.AddDate(0, 6, 0)
}

func (s *Server) handleMyFeed(c echo.Context) error {
	ctx := c.Request().Context()
	me, err := s.feedPrincipal(ctx, c.Param("feed_token"))
	if err != nil {
		return err
	}
	from, to := s.feedWindow()
	bs, err := s.store.Bookings(ctx, scheduling.BookingFilter{UserID: me.UserID, From: from, To: to, IncludeCancelled: true})
	if err != nil {
		return err
	}
	return s.writeFeed(c, me, "My bookings", bs)
}

func (s *Server) handleInstrumentFeed(c echo.Context) error {
	ctx := c.Request().Context()
	me, err := s.feedPrincipal(ctx, c.Param("feed_token"))
	if err != nil {
		return err
	}
	in, err := s.store.Instrument(ctx, strings.TrimSuffix(c.Param("instrument_id"), ".ics"))
	if err != nil {
		return err
	}
	from, to := s.feedWindow()
	bs, err := s.store.Bookings(ctx, scheduling.BookingFilter{InstrumentID: in.ID, From: from, To: to})
	if err != nil {
		return err
	}
	return s.writeFeed(c, me, in.Name, bs)
}

// writeFeed renders bookings as iCalendar, showing details only of bookings the
// feed's owner may see; others appear as "Booked" with their kind.
func (s *Server) writeFeed(c echo.Context, me accounts.Principal, name string, bs []scheduling.Booking) error {
	ctx := c.Request().Context()
	mine, err := s.myProjects(ctx, me)
	if err != nil {
		return err
	}
	names := map[string]string{}
	entries := make([]calendar.Entry, 0, len(bs))
	for _, b := range bs {
		if _, ok := names[b.InstrumentID]; !ok {
			in, err := s.store.Instrument(ctx, b.InstrumentID)
			if err != nil {
				return err
			}
			names[b.InstrumentID] = in.Name
		}
		e := calendar.Entry{Booking: b, InstrumentName: names[b.InstrumentID], Summary: "Booked (" + string(b.Kind) + ")"}
		if me.CanReadEverything() || b.UserID == me.UserID || mine[b.ProjectID] || b.Kind == scheduling.KindService {
			e.Summary = names[b.InstrumentID] + ": " + string(b.Kind)
			if b.Kind == scheduling.KindService && b.Note != "" {
				e.Summary += " (" + b.Note + ")"
			}
			e.Description = "booking " + b.ID
		}
		entries = append(entries, e)
	}
	var buf bytes.Buffer
	// UIDs must not change with the host name a client used, so the host part is fixed.
	if err := calendar.Write(&buf, calendar.Feed{Name: name, ProdID: "-//beamledger//bookings//EN", Host: "beamledger"}, entries); err != nil {
		return err
	}
	c.Response().Header().Set("Cache-Control", "private, max-age=300")
	return c.Blob(http.StatusOK, "text/calendar; charset=utf-8", buf.Bytes())
}
