package server

import (
	"fmt"
	"net/http"

	"github.com/labstack/echo/v4"

	"beamledger/accounts"
)

// routes declares every route with its access rule. A route cannot be added without
// a rule, and the route matrix test fails on any route it has no expectation for.
func (s *Server) routes() error {
	add := func(method, path string, r rule, h echo.HandlerFunc) {
		s.rules[method+" "+path] = r
		s.echo.Add(method, path, h, s.authorize(r))
	}

	// Outside the API and outside auth.
	add(http.MethodGet, "/healthz", open(), s.handleHealth)
	add(http.MethodGet, "/readyz", open(), s.handleReady)
	add(http.MethodGet, "/api/openapi.json", open(), s.handleOpenAPI)
	s.webRoutes(add)

	const v1 = "/api/v1"
	add(http.MethodPost, v1+"/auth/login", open(), s.handleLogin)
	add(http.MethodPost, v1+"/auth/refresh", open(), s.handleRefresh)
	add(http.MethodPost, v1+"/auth/logout", open(), s.handleLogout)

	add(http.MethodGet, v1+"/me", users(everyone...), s.handleMe)
	add(http.MethodPost, v1+"/me/password", users(everyone...), s.handleChangePassword)

	add(http.MethodGet, v1+"/facility", usersOrAgent(accounts.ScopeInstrumentRead, everyone...), s.handleFacility)
	add(http.MethodPut, v1+"/facility", users(managers...), s.handleFacilitySet)

	add(http.MethodGet, v1+"/users", users(readersAll...), s.handleUserList)
	add(http.MethodPost, v1+"/users", users(managers...), s.handleUserCreate)
	add(http.MethodGet, v1+"/users/:user_id", users(everyone...), s.handleUserGet)
	add(http.MethodPatch, v1+"/users/:user_id", users(everyone...), s.handleUserPatch)
	add(http.MethodPost, v1+"/users/:user_id/password", users(managers...), s.handleUserResetPassword)

	add(http.MethodGet, v1+"/projects", users(everyone...), s.handleProjectList)
	add(http.MethodPost, v1+"/projects", users(managers...), s.handleProjectCreate)
	add(http.MethodGet, v1+"/projects/:project_id", users(everyone...), s.handleProjectGet)
	add(http.MethodPatch, v1+"/projects/:project_id", users(managers...), s.handleProjectPatch)
	add(http.MethodPut, v1+"/projects/:project_id/members/:user_id", users(accounts.RoleManager, accounts.RoleResearcher), s.handleMemberAdd)
	add(http.MethodDelete, v1+"/projects/:project_id/members/:user_id", users(accounts.RoleManager, accounts.RoleResearcher), s.handleMemberRemove)

	add(http.MethodGet, v1+"/instruments", usersOrAgent(accounts.ScopeInstrumentRead, everyone...), s.handleInstrumentList)
	add(http.MethodPost, v1+"/instruments", users(managers...), s.handleInstrumentCreate)
	add(http.MethodGet, v1+"/instruments/:instrument_id", usersOrAgent(accounts.ScopeInstrumentRead, everyone...), s.handleInstrumentGet)
	add(http.MethodPut, v1+"/instruments/:instrument_id/condition-limits", users(facilityOps...), s.handleConditionLimitsSet)
	add(http.MethodPut, v1+"/instruments/:instrument_id/bookable", users(managers...), s.handleInstrumentBookableSet)
	add(http.MethodPut, v1+"/instruments/:instrument_id/capabilities", users(managers...), s.handleInstrumentCapabilitiesSet)
	add(http.MethodGet, v1+"/instruments/:instrument_id/agent-tokens", users(facilityOps...), s.handleAgentTokenList)
	add(http.MethodPost, v1+"/instruments/:instrument_id/agent-tokens", users(managers...), s.handleAgentTokenCreate)
	add(http.MethodDelete, v1+"/instruments/:instrument_id/agent-tokens/:token_id", users(managers...), s.handleAgentTokenRevoke)

	add(http.MethodGet, v1+"/facility/booking-rules", usersOrAgent(accounts.ScopeInstrumentRead, everyone...), s.handleFacilityRulesGet)
	add(http.MethodPut, v1+"/facility/booking-rules", users(managers...), s.handleFacilityRulesSet)
	add(http.MethodGet, v1+"/instruments/:instrument_id/booking-rules", usersOrAgent(accounts.ScopeInstrumentRead, everyone...), s.handleInstrumentRulesGet)
	add(http.MethodPut, v1+"/instruments/:instrument_id/booking-rules", users(managers...), s.handleInstrumentRulesSet)
	add(http.MethodGet, v1+"/quotas", users(everyone...), s.handleQuotaList)
	add(http.MethodPut, v1+"/quotas", users(managers...), s.handleQuotaSet)
	add(http.MethodGet, v1+"/reports/fair-share", users(everyone...), s.handleFairShare)

	add(http.MethodGet, v1+"/qualifications", users(everyone...), s.handleQualificationList)
	add(http.MethodPost, v1+"/instruments/:instrument_id/qualifications", users(facilityOps...), s.handleQualificationGrant)
	add(http.MethodPost, v1+"/qualifications/:qualification_id/revoke", users(facilityOps...), s.handleQualificationRevoke)

	bookers := []accounts.Role{accounts.RoleManager, accounts.RoleStaff, accounts.RoleResearcher}
	add(http.MethodGet, v1+"/bookings", usersOrAgent(accounts.ScopeInstrumentRead, everyone...), s.handleBookingList)
	add(http.MethodPost, v1+"/bookings", users(bookers...), s.handleBookingCreate)
	add(http.MethodGet, v1+"/bookings/:booking_id", users(everyone...), s.handleBookingGet)
	add(http.MethodPatch, v1+"/bookings/:booking_id", users(bookers...), s.handleBookingMove)
	add(http.MethodPost, v1+"/bookings/:booking_id/cancel", users(bookers...), s.handleBookingCancel)
	add(http.MethodGet, v1+"/bookings/:booking_id/events", users(everyone...), s.handleBookingEvents)
	add(http.MethodPost, v1+"/series", users(bookers...), s.handleSeriesCreate)
	add(http.MethodGet, v1+"/series/:series_id", users(everyone...), s.handleSeriesGet)
	add(http.MethodPost, v1+"/series/:series_id/cancel", users(bookers...), s.handleSeriesCancel)
	add(http.MethodGet, v1+"/waitlist", users(everyone...), s.handleWaitlistList)
	add(http.MethodPost, v1+"/waitlist", users(bookers...), s.handleWaitlistJoin)
	add(http.MethodPost, v1+"/waitlist/:entry_id/withdraw", users(bookers...), s.handleWaitlistWithdraw)
	add(http.MethodPost, v1+"/waitlist/:entry_id/accept", users(bookers...), s.handleWaitlistAccept)
	add(http.MethodPost, v1+"/bookings/:booking_id/check-in", usageRule(), s.handleCheckIn)
	add(http.MethodPost, v1+"/bookings/:booking_id/check-out", usageRule(), s.handleCheckOut)
	add(http.MethodGet, v1+"/bookings/:booking_id/usage", usersOrAgent(accounts.ScopeUsageWrite, everyone...), s.handleUsageReport)

	// Cost recovery: managers set rates, policy, funding and issue statements; every
	// user reads rates and policy, and their own projects' accounts and statements;
	// staff and auditors read every project's and the reports.
	add(http.MethodGet, v1+"/instruments/:instrument_id/rate-schedules", users(everyone...), s.handleRateScheduleList)
	add(http.MethodPost, v1+"/instruments/:instrument_id/rate-schedules", users(managers...), s.handleRateScheduleCreate)
	add(http.MethodGet, v1+"/facility/billing-policy", users(everyone...), s.handleFacilityBillingGet)
	add(http.MethodPut, v1+"/facility/billing-policy", users(managers...), s.handleFacilityBillingSet)
	add(http.MethodGet, v1+"/instruments/:instrument_id/billing-policy", users(everyone...), s.handleInstrumentBillingGet)
	add(http.MethodPut, v1+"/instruments/:instrument_id/billing-policy", users(managers...), s.handleInstrumentBillingSet)
	add(http.MethodGet, v1+"/projects/:project_id/funding-accounts", users(everyone...), s.handleFundingAccountList)
	add(http.MethodPost, v1+"/projects/:project_id/funding-accounts", users(managers...), s.handleFundingAccountCreate)
	add(http.MethodPatch, v1+"/funding-accounts/:account_id", users(managers...), s.handleFundingAccountPatch)
	add(http.MethodGet, v1+"/projects/:project_id/funding", users(everyone...), s.handleProjectFundingGet)
	add(http.MethodPut, v1+"/projects/:project_id/funding", users(managers...), s.handleProjectFundingSet)
	add(http.MethodGet, v1+"/bookings/:booking_id/funding", users(everyone...), s.handleBookingFundingGet)
	add(http.MethodPut, v1+"/bookings/:booking_id/funding", users(managers...), s.handleBookingFundingSet)
	add(http.MethodGet, v1+"/projects/:project_id/statements", users(everyone...), s.handleStatementList)
	add(http.MethodPost, v1+"/projects/:project_id/statements", users(managers...), s.handleStatementCompute)
	add(http.MethodGet, v1+"/statements/:statement_id", users(everyone...), s.handleStatementGet)
	add(http.MethodPost, v1+"/statements/:statement_id/issue", users(managers...), s.handleStatementIssue)
	add(http.MethodPost, v1+"/projects/:project_id/adjustments", users(managers...), s.handleAdjustmentCreate)
	add(http.MethodPost, v1+"/rate-calculations", users(managers...), s.handleRateCalculation)
	add(http.MethodPost, v1+"/cost-entries", users(managers...), s.handleCostEntryCreate)
	add(http.MethodGet, v1+"/reports/recovery", users(readersAll...), s.handleRecoveryReport)
	add(http.MethodGet, v1+"/reports/utilization", users(readersAll...), s.handleUtilizationReport)
	add(http.MethodGet, v1+"/reports/facility-utilization", users(readersAll...), s.handleFacilityUtilization)

	// Acquisitions and what they are recorded against. The records are append-only.
	recorders := usersOrAgent(accounts.ScopeAcquisitionWrite, bookers...)
	add(http.MethodPost, v1+"/derive", usersOrAgent(accounts.ScopeAcquisitionWrite, everyone...), s.handleDerive)
	add(http.MethodGet, v1+"/facility/optics-settings", usersOrAgent(accounts.ScopeInstrumentRead, everyone...), s.handleOpticsSettingsGet)
	add(http.MethodPut, v1+"/facility/optics-settings", users(managers...), s.handleOpticsSettingsSet)
	add(http.MethodGet, v1+"/specimens", users(everyone...), s.handleSpecimenList)
	add(http.MethodPost, v1+"/specimens", users(bookers...), s.handleSpecimenCreate)
	add(http.MethodGet, v1+"/specimens/:specimen_id", users(everyone...), s.handleSpecimenGet)
	add(http.MethodGet, v1+"/instruments/:instrument_id/tunings", usersOrAgent(accounts.ScopeInstrumentRead, everyone...), s.handleTuningList)
	add(http.MethodPost, v1+"/instruments/:instrument_id/tunings", usersOrAgent(accounts.ScopeAcquisitionWrite, facilityOps...), s.handleTuningRecord)
	add(http.MethodGet, v1+"/tunings/:tuning_id", users(everyone...), s.handleTuningGet)
	add(http.MethodGet, v1+"/instruments/:instrument_id/calibrations", usersOrAgent(accounts.ScopeInstrumentRead, everyone...), s.handleCalibrationList)
	add(http.MethodPost, v1+"/instruments/:instrument_id/calibrations", users(facilityOps...), s.handleCalibrationRecord)
	add(http.MethodGet, v1+"/acquisitions", users(everyone...), s.handleAcquisitionList)
	add(http.MethodPost, v1+"/acquisitions", recorders, s.handleAcquisitionCreate)
	add(http.MethodGet, v1+"/acquisitions/:acquisition_id", users(everyone...), s.handleAcquisitionGet)
	add(http.MethodGet, v1+"/acquisitions/:acquisition_id/versions", users(everyone...), s.handleAcquisitionVersions)
	add(http.MethodPost, v1+"/acquisitions/:acquisition_id/corrections", users(bookers...), s.handleAcquisitionCorrect)

	// Data files: bytes in the object store under their SHA-256, records here.
	add(http.MethodPost, v1+"/files", usersOrAgent(accounts.ScopeFileWrite, bookers...), s.handleFileUpload)
	add(http.MethodGet, v1+"/files", users(everyone...), s.handleFileList)
	add(http.MethodGet, v1+"/files/:file_id", users(everyone...), s.handleFileGet)
	add(http.MethodGet, v1+"/files/:file_id/content", users(everyone...), s.handleFileContent)
	add(http.MethodGet, v1+"/files/:file_id/lineage", users(everyone...), s.handleLineage)
	add(http.MethodPost, v1+"/derivations", users(bookers...), s.handleDerivationCreate)

	// Resumable uploads (tus 1.0): the same writers as POST /files; an upload is its
	// creator's, or staff's and managers'. OPTIONS is how a client discovers the
	// protocol, before it has a token.
	tus := func(method, path string, r rule, h echo.HandlerFunc) {
		s.rules[method+" "+path] = r
		s.echo.Add(method, path, h, tusResumable, s.authorize(r))
	}
	fileWriters := usersOrAgent(accounts.ScopeFileWrite, bookers...)
	tus(http.MethodOptions, v1+"/uploads", open(), s.handleUploadOptions)
	tus(http.MethodPost, v1+"/uploads", fileWriters, s.handleUploadCreate)
	tus(http.MethodHead, v1+"/uploads/:upload_id", fileWriters, s.handleUploadHead)
	tus(http.MethodPatch, v1+"/uploads/:upload_id", fileWriters, s.handleUploadPatch)
	tus(http.MethodDelete, v1+"/uploads/:upload_id", fileWriters, s.handleUploadDelete)

	// The ledger: checkpoints, the key and proofs are public (they commit to content
	// without revealing it); events hold records of every project.
	add(http.MethodGet, v1+"/ledger", open(), s.handleLedgerHead)
	add(http.MethodGet, v1+"/ledger/key", open(), s.handleLedgerKey)
	add(http.MethodGet, v1+"/ledger/checkpoint", open(), s.handleLedgerCheckpoint)
	add(http.MethodGet, v1+"/ledger/checkpoints", open(), s.handleLedgerCheckpoints)
	add(http.MethodPost, v1+"/ledger/checkpoints", users(managers...), s.handleLedgerCheckpointSign)
	add(http.MethodGet, v1+"/ledger/proofs/inclusion", open(), s.handleInclusionProof)
	add(http.MethodGet, v1+"/ledger/proofs/consistency", open(), s.handleConsistencyProof)
	add(http.MethodGet, v1+"/ledger/events/:index", users(readersAll...), s.handleLedgerEvent)
	add(http.MethodGet, v1+"/ledger/entities/:entity_type/:entity_id/events", users(readersAll...), s.handleLedgerEntityEvents)

	// Traces: everything behind a data file, found by its SHA-256 (or its bytes), as
	// JSON, as W3C PROV-JSON and as a provenance bundle. Those who read everything
	// and the members of the file's project; to anyone else the file does not exist.
	add(http.MethodGet, v1+"/trace/:sha256", users(everyone...), s.handleTrace)
	add(http.MethodPost, v1+"/trace", users(everyone...), s.handleTraceBytes)
	add(http.MethodGet, v1+"/trace/:sha256/prov", users(everyone...), s.handleTraceProv)
	add(http.MethodGet, v1+"/trace/:sha256/bundle", users(everyone...), s.handleTraceBundle)

	add(http.MethodGet, v1+"/me/feed-tokens", users(everyone...), s.handleFeedTokenList)
	add(http.MethodPost, v1+"/me/feed-tokens", users(everyone...), s.handleFeedTokenCreate)
	add(http.MethodDelete, v1+"/me/feed-tokens/:feed_token_id", users(everyone...), s.handleFeedTokenRevoke)
	// Calendar clients send no Authorization header: the feed token in the path is the
	// credential, checked by the handlers.
	add(http.MethodGet, "/feeds/:feed_token/mine.ics", open(), s.handleMyFeed)
	add(http.MethodGet, "/feeds/:feed_token/instruments/:instrument_id", open(), s.handleInstrumentFeed)

	// Every route must carry a rule; echo's own routes (none today) would show here.
	for _, r := range s.echo.Routes() {
		if _, ok := s.rules[r.Method+" "+r.Path]; !ok {
			return fmt.Errorf("route %s %s has no access rule", r.Method, r.Path)
		}
	}
	return nil
}
