package evaluate

import (
	"encoding/base64"
	"fmt"
	"html"
	"math"
	"os"
	"path/filepath"
	"sort"
	"strings"
)

// WriteFunc writes a whole file so that a reader never sees it half
// written (for example through a temporary file and a rename).
type WriteFunc func(path string, data []byte) error

// WriteReport writes into dir the plots as PNG files, report.md (which
// links them) and report.html (which embeds them as data URIs, so it can be
// sent on its own). Every file goes through write; all plots are rendered
// before the first file is written.
func WriteReport(dir string, s *Summary, write WriteFunc) error {
	plots, err := Plots(s)
	if err != nil {
		return err
	}
	if err := os.MkdirAll(dir, 0o755); err != nil {
		return fmt.Errorf("report folder: %w", err)
	}
	for _, p := range plots {
		if err := write(filepath.Join(dir, p.Name), p.PNG); err != nil {
			return err
		}
	}
	if err := write(filepath.Join(dir, "report.md"), []byte(Markdown(s, plots))); err != nil {
		return err
	}
	return write(filepath.Join(dir, "report.html"), []byte(HTML(s, plots)))
}

// row is one line of the report's results table.
type row struct{ name, value, note string }

func fmtCI(c Interval) string { return fmt.Sprintf("%.3f to %.3f", c[0], c[1]) }

func fmtProp(p Proportion) string {
	return fmt.Sprintf("%.3f (%d/%d; 95%% CI %s)", p.Value, p.K, p.N, fmtCI(p.CI95))
}

func optional(v *float64, format string) string {
	if v == nil {
		return "undefined"
	}
	return fmt.Sprintf(format, *v)
}

// rows lists the report's figures in reading order.
func rows(s *Summary) []row {
	var r []row
	if s.ROC != nil {
		r = append(r, row{"cases", fmt.Sprintf("%d (%d positive, prevalence %.3f)", s.N, s.NPositive, s.Prevalence),
			fmt.Sprintf("positive label %q, negative %q", s.PositiveLabel, s.NegativeLabel)})
	} else {
		r = append(r, row{"cases", fmt.Sprintf("%d", s.N), "time-to-event evaluation only"})
	}
	if len(s.Excluded) > 0 {
		var ex []string
		for k, v := range s.Excluded {
			ex = append(ex, fmt.Sprintf("%s %d", k, v))
		}
		sort.Strings(ex)
		r = append(r, row{"excluded rows", strings.Join(ex, ", "), "rows with an empty cell in a used column, or without a label"})
	}
	if s.ROC != nil {
		r = append(r, binaryRows(s)...)
	}
	if s.Survival != nil {
		r = append(r, survivalRows(s.Survival)...)
	}
	return r
}

// binaryRows lists the figures of the evaluation against binary labels.
func binaryRows(s *Summary) []row {
	op := s.OperatingPoint
	r := []row{{"AUC (" + s.Score + ")", fmt.Sprintf("%.3f (95%% CI %s)", s.AUC.Value, fmtCI(s.AUC.CI95)), s.AUC.Method}}
	if c := s.Compare; c != nil {
		r = append(r,
			row{"AUC (" + c.Column + ")", fmt.Sprintf("%.3f (95%% CI %s)", c.AUC.Value, fmtCI(c.AUC.CI95)), c.AUC.Method},
			row{"difference", fmt.Sprintf("%+.3f, z %s, p %s", c.Delta, optional(c.Z, "%.2f"), optional(c.PValue, "%.4g")), c.Method})
	}
	r = append(r,
		row{"threshold", fmt.Sprintf("%.4g", op.Threshold), thresholdNote(op.Rule)},
		row{"sensitivity", fmtProp(op.Sensitivity), op.CIMethod},
		row{"specificity", fmtProp(op.Specificity), op.CIMethod},
		row{"PPV", fmtProp(op.PPV), "at this cohort's prevalence"},
		row{"NPV", fmtProp(op.NPV), "at this cohort's prevalence"},
		row{"accuracy", fmtProp(op.Accuracy), ""},
		row{"confusion", fmt.Sprintf("TP %d, FP %d, TN %d, FN %d", op.Confusion.TP, op.Confusion.FP, op.Confusion.TN, op.Confusion.FN), ""},
	)
	if rd := s.Reader; rd != nil {
		r = append(r,
			row{"reader sensitivity", fmtProp(rd.Sensitivity), "reader " + rd.Column},
			row{"reader specificity", fmtProp(rd.Specificity), "reader " + rd.Column},
			row{"model vs reader", fmt.Sprintf("model right/reader wrong %d, model wrong/reader right %d, p %.4g", rd.ModelOnly, rd.ReaderOnly, rd.PValue), rd.Method},
		)
	}
	if c := s.Calibration; c != nil {
		r = append(r,
			row{"Brier score", fmt.Sprintf("%.4f", c.Brier), "Brier 1950"},
			row{"ECE", fmt.Sprintf("%.4f", c.ECE), c.ECEMethod},
			row{"calibration intercept / slope", optional(c.Intercept, "%.3f") + " / " + optional(c.Slope, "%.3f"), c.Method},
		)
	}
	if b := s.Bootstrap; b != nil {
		r = append(r, row{"bootstrap 95% CIs", fmt.Sprintf("AUC %s; sensitivity %s; specificity %s", fmtCI(b.AUC), fmtCI(b.Sensitivity), fmtCI(b.Specificity)),
			fmt.Sprintf("%s; %d replicates, seed %d; threshold held fixed", b.Method, b.Replicates, b.Seed)})
	}
	return r
}

// thresholdNote says how the threshold was chosen and, when it was fitted
// on these cases, that the figures at it are optimistic.
func thresholdNote(rule Rule) string {
	n := fmt.Sprintf("rule %s; a case is called positive when its score is at least the threshold", rule)
	if rule != RuleFixed {
		n += ". The threshold was chosen on these same cases, so sensitivity and specificity at it are optimistic " +
			"(Leeflang et al. 2008); fix it on other data and pass it with --threshold for an honest estimate"
	}
	return n
}

// survivalRows lists the figures of the time-to-event evaluation.
func survivalRows(sv *SurvivalSummary) []row {
	u := sv.TimeUnit
	r := []row{
		{"follow-up", fmt.Sprintf("%d cases, %d events, %d censored; median follow-up %s", sv.N, sv.Events, sv.Censored, FollowUpText(sv)), sv.FUMethod},
		{"Harrell's C", fmt.Sprintf("%.3f%s (%d comparable pairs)", sv.Harrell.C, bootCI(sv.Bootstrap, true), sv.Harrell.Comparable), sv.Harrell.Method},
		{"Uno's C", fmt.Sprintf("%.3f%s, truncated at %.4g %s", sv.Uno.C, bootCI(sv.Bootstrap, false), sv.Uno.Truncation, u), sv.Uno.Method},
	}
	for _, a := range sv.TimeAUC {
		v := "undefined"
		if !math.IsNaN(a.AUC) {
			v = fmt.Sprintf("%.3f", a.AUC)
		}
		if a.CI95 != nil {
			v += fmt.Sprintf(" (bootstrap 95%% CI %s)", fmtCI(*a.CI95))
		}
		r = append(r, row{fmt.Sprintf("AUC at %.4g %s", a.Horizon, u),
			fmt.Sprintf("%s; %d cases, %d controls, %d censored before the horizon", v, a.Cases, a.Controls, a.CensoredBefore), sv.AUCMethod})
	}
	r = append(r, row{"censoring", "", sv.Handling}, row{"risk groups", sv.Groups, "Kaplan–Meier (Kaplan and Meier 1958) by group"})
	for _, c := range sv.Curves {
		var at []string
		for _, h := range c.AtH {
			at = append(at, fmt.Sprintf("S(%.4g) %.3f (95%% CI %s; %d at risk, %d censored before)", h.Horizon, h.Surv, fmtOptCI(h.CI95), h.AtRisk, h.CensoredBefore))
		}
		r = append(r, row{"group " + c.Name, fmt.Sprintf("%d cases, %d events; %s", c.N, c.Events, strings.Join(at, "; ")), "log-Greenwood interval, as survfit"})
	}
	if lr := sv.LogRank; lr != nil {
		r = append(r, row{"log-rank", fmt.Sprintf("χ² %.3f on %d df, p %.4g", lr.ChiSq, lr.DF, lr.PValue), lr.Method})
	}
	return r
}

func fmtOptCI(c *Interval) string {
	if c == nil {
		return "undefined"
	}
	return fmtCI(*c)
}

// FollowUpText is the median follow-up in words, with its unit.
func FollowUpText(sv *SurvivalSummary) string {
	if sv.FollowUp == nil {
		return "not reached (the reverse Kaplan–Meier stays above 0.5)"
	}
	return fmt.Sprintf("%.4g %s", *sv.FollowUp, sv.TimeUnit)
}

func bootCI(b *SurvBootstrap, harrell bool) string {
	if b == nil {
		return ""
	}
	ci := b.Uno
	if harrell {
		ci = b.Harrell
	}
	return fmt.Sprintf(" (bootstrap 95%% CI %s)", fmtCI(ci))
}

// section is one table of the report after the results: a title, an
// introduction, a header row and rows.
type section struct {
	title, intro string
	head         []string
	rows         [][]string
}

// sections lists the report's further tables: provenance, the flow of
// studies and the subgroups.
func sections(s *Summary) []section {
	var out []section
	if p := s.Provenance; p != nil {
		pv := section{title: "Where these numbers came from", head: []string{"item", "value"}}
		for _, in := range p.Inputs {
			pv.rows = append(pv.rows, []string{in.Role, fmt.Sprintf("%s (%d bytes, sha256 %s)", in.Path, in.Bytes, in.SHA256)})
		}
		models := "the table has no model_sha256 column"
		if len(p.Models) > 0 {
			models = "sha256 " + strings.Join(p.Models, ", ")
		}
		pv.rows = append(pv.rows, []string{"model (from the table)", models}, []string{"midsag", p.Version},
			[]string{"command line", strings.Join(p.Command, " ")}, []string{"date", p.Date})
		out = append(out, pv)
	}
	if len(s.Flow) > 0 {
		fl := section{title: "Flow of studies", head: []string{"step", "n", "detail"},
			intro: "In the order of the STARD 2015 flow diagram (Bossuyt et al. 2015, BMJ 351:h5527, item 19)."}
		for _, f := range s.Flow {
			fl.rows = append(fl.rows, []string{f.Step, fmt.Sprintf("%d", f.N), f.Detail})
		}
		out = append(out, fl)
	}
	if len(s.Subgroups) > 0 {
		out = append(out, subgroupSection(s))
	}
	return out
}

func subgroupSection(s *Summary) section {
	sg := section{title: "Subgroups", head: []string{"column", "value", "n"},
		intro: "AUC with its DeLong 95% interval; sensitivity and specificity at the whole cohort's threshold with Wilson intervals; Harrell's C without an interval. Subgroups are descriptive: small ones give wide intervals."}
	if s.ROC != nil {
		sg.head = append(sg.head, "positive", "AUC", "sensitivity", "specificity")
	}
	if s.Survival != nil {
		sg.head = append(sg.head, "events", "Harrell's C")
	}
	for _, g := range s.Subgroups {
		r := []string{g.Column, g.Value, fmt.Sprintf("%d", g.N)}
		if s.ROC != nil {
			auc := "undefined (one class)"
			if g.AUC != nil {
				auc = fmt.Sprintf("%.3f (%s)", g.AUC.Value, fmtCI(g.AUC.CI95))
			}
			r = append(r, fmt.Sprintf("%d", g.NPositive), auc, fmtProp(*g.Sensitivity), fmtProp(*g.Specificity))
		}
		if s.Survival != nil {
			c := "undefined"
			if g.HarrellC != nil {
				c = fmt.Sprintf("%.3f", *g.HarrellC)
			}
			r = append(r, fmt.Sprintf("%d", g.Events), c)
		}
		sg.rows = append(sg.rows, r)
	}
	return sg
}

// Markdown returns report.md, which links the plots as files beside it.
func Markdown(s *Summary, plots []Plot) string {
	var b strings.Builder
	fmt.Fprintf(&b, "# midsag evaluation\n\n> **%s**\n\n", s.Notice)
	b.WriteString("| measure | value | how |\n| --- | --- | --- |\n")
	cell := func(x string) string { return strings.ReplaceAll(x, "|", `\|`) }
	for _, r := range rows(s) {
		fmt.Fprintf(&b, "| %s | %s | %s |\n", cell(r.name), cell(r.value), cell(r.note))
	}
	for _, sec := range sections(s) {
		fmt.Fprintf(&b, "\n## %s\n\n", sec.title)
		if sec.intro != "" {
			fmt.Fprintf(&b, "%s\n\n", sec.intro)
		}
		fmt.Fprintf(&b, "| %s |\n|%s\n", strings.Join(sec.head, " | "), strings.Repeat(" --- |", len(sec.head)))
		for _, r := range sec.rows {
			cells := make([]string, len(r))
			for i, c := range r {
				cells[i] = cell(c)
			}
			fmt.Fprintf(&b, "| %s |\n", strings.Join(cells, " | "))
		}
	}
	if len(s.Warnings) > 0 {
		b.WriteString("\n## Warnings\n\n")
		for _, w := range s.Warnings {
			fmt.Fprintf(&b, "- %s\n", w)
		}
	}
	b.WriteString("\n## Plots\n")
	for _, p := range plots {
		fmt.Fprintf(&b, "\n![%s](%s)\n\n%s\n", p.Name, p.Name, p.Caption)
	}
	fmt.Fprintf(&b, "\n---\n\n%s\n", s.Notice)
	return b.String()
}

// HTML returns report.html with the plots embedded as base64 data URIs.
func HTML(s *Summary, plots []Plot) string {
	var b strings.Builder
	e := html.EscapeString
	b.WriteString(`<!DOCTYPE html>
<html lang="en"><head><meta charset="utf-8"><title>midsag evaluation</title>
<style>
body{font-family:system-ui,sans-serif;max-width:60em;margin:2em auto;padding:0 1em;color:#222}
.notice{border:2px solid #d55e00;background:#fff4ec;padding:.6em 1em;font-weight:bold}
table{border-collapse:collapse;margin:1em 0}td,th{border:1px solid #ccc;padding:.3em .6em;text-align:left;vertical-align:top}
td.how{color:#555;font-size:.9em}td{overflow-wrap:anywhere}figure{margin:1.5em 0}img{max-width:100%;border:1px solid #eee}
</style></head><body>
<h1>midsag evaluation</h1>
`)
	fmt.Fprintf(&b, "<p class=\"notice\">%s</p>\n<table><tr><th>measure</th><th>value</th><th>how</th></tr>\n", e(s.Notice))
	for _, r := range rows(s) {
		fmt.Fprintf(&b, "<tr><td>%s</td><td>%s</td><td class=\"how\">%s</td></tr>\n", e(r.name), e(r.value), e(r.note))
	}
	b.WriteString("</table>\n")
	for _, sec := range sections(s) {
		fmt.Fprintf(&b, "<h2>%s</h2>\n", e(sec.title))
		if sec.intro != "" {
			fmt.Fprintf(&b, "<p>%s</p>\n", e(sec.intro))
		}
		b.WriteString("<table><tr>")
		for _, h := range sec.head {
			fmt.Fprintf(&b, "<th>%s</th>", e(h))
		}
		b.WriteString("</tr>\n")
		for _, r := range sec.rows {
			b.WriteString("<tr>")
			for _, c := range r {
				fmt.Fprintf(&b, "<td>%s</td>", e(c))
			}
			b.WriteString("</tr>\n")
		}
		b.WriteString("</table>\n")
	}
	if len(s.Warnings) > 0 {
		b.WriteString("<h2>Warnings</h2><ul>\n")
		for _, w := range s.Warnings {
			fmt.Fprintf(&b, "<li>%s</li>\n", e(w))
		}
		b.WriteString("</ul>\n")
	}
	for _, p := range plots {
		fmt.Fprintf(&b, "<figure><img alt=\"%s\" src=\"data:image/png;base64,%s\"><figcaption>%s</figcaption></figure>\n",
			e(p.Name), base64.StdEncoding.EncodeToString(p.PNG), e(p.Caption))
	}
	fmt.Fprintf(&b, "<p class=\"notice\">%s</p>\n</body></html>\n", e(s.Notice))
	return b.String()
}
