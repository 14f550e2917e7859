// Package report writes a run's test report as a PDF (github.com/go-pdf/fpdf,
// pure Go: no browser or external program at run time). The layout is our
// own: specimen, material, grade and geometry; fixture and the instruments'
// identities as read at the run; calibration; test conditions; per loop the
// plot, the figures with U rounded as the GUM asks (two significant digits,
// JCGM 100:2008 7.2.6), the corrections applied and the verdicts with their
// decision rule; the cautions; software version and config hash; room to sign.
// Its content follows the list of ISO/IEC 17025:2017 §7.8 (from memory).
//
// The PDF is drawn with github.com/go-pdf/fpdf (pure Go) and the Go fonts from golang.org/x/image
// (UTF-8: ±, μ, ≤). The engine records each instrument's `*IDN?` reply, as read at open, as a run event
// (`instrument ROLE: REPLY`) that the report shows. `TestReportText` and `TestReportRendersAPage` render the
// PDF with poppler's `pdftotext`, `pdftoppm` and `pdfimages` (Debian `poppler-utils`; `TestReportPlotsPerLoop`
// counts the plots: one per loop, two for a magnet's curve): they skip with a message when the
// tools are missing and fail under `CI=true`.
package report
