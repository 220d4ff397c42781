/* replay_svg.c: the SVG primitives of the replay report (replay_svg.h).
 *
 * Ticks: "nice" steps of 1, 2 or 5 times a power of ten giving about
 * RP_TICKS_TARGET ticks on linear axes (the usual rule of plotting
 * libraries); decades on log axes.  Everything is written with fprintf,
 * numbers at one decimal of a pixel, which keeps a page of plots small. */
#include <math.h>
#include <string.h>

#include "replay_svg.h"

#define RP_TICKS_TARGET 6.0 /* ticks wanted on a linear axis */
#define RP_FONT "font-family=\"sans-serif\" font-size=\"12\""

void rp_xml_text(FILE *f, const char *s)
{
	for (; *s != '\0'; s++) {
		switch (*s) {
		case '&': fputs("&amp;", f); break;
		case '<': fputs("&lt;", f); break;
		case '>': fputs("&gt;", f); break;
		case '"': fputs("&quot;", f); break;
		case '\'': fputs("&apos;", f); break;
		default: fputc(*s, f);
		}
	}
}

void rp_svg_begin(struct rp_plot *pl, double h, const char *title)
{
	pl->w = RP_SVG_W;
	pl->h = h;
	fprintf(pl->f, "<svg xmlns=\"http://www.w3.org/2000/svg\" "
		"width=\"%.0f\" height=\"%.0f\" viewBox=\"0 0 %.0f %.0f\" "
		"role=\"img\"><title>", pl->w, h, pl->w, h);
	rp_xml_text(pl->f, title);
	fputs("</title>\n", pl->f);
}

void rp_svg_end(struct rp_plot *pl)
{
	fputs("</svg>\n", pl->f);
}

double rp_px(const struct rp_plot *pl, double x)
{
	double span = pl->x1 > pl->x0 ? pl->x1 - pl->x0 : 1.0;

	return RP_SVG_ML + (x - pl->x0) / span * (pl->w - RP_SVG_ML
						   - RP_SVG_MR);
}

double rp_py(const struct rp_plot *pl, double y)
{
	double span = pl->y1 > pl->y0 ? pl->y1 - pl->y0 : 1.0;
	double v = pl->logy ? log10(y > 0 ? y : 1e-300) : y;
	double py = pl->h - RP_SVG_MB - (v - pl->y0) / span
		    * (pl->h - RP_SVG_MT - RP_SVG_MB);

	if (py < RP_SVG_MT - 4)
		py = RP_SVG_MT - 4;
	if (py > pl->h - RP_SVG_MB + 4)
		py = pl->h - RP_SVG_MB + 4;
	return py;
}

/* A nice step for a linear range. */
static double rp_step(double lo, double hi)
{
	double raw = (hi - lo) / RP_TICKS_TARGET, mag, r;

	if (!(raw > 0))
		return 1.0;
	mag = pow(10.0, floor(log10(raw)));
	r = raw / mag;
	return (r < 1.5 ? 1.0 : r < 3.5 ? 2.0 : r < 7.5 ? 5.0 : 10.0) * mag;
}

static void rp_yticks(const struct rp_plot *pl)
{
	double step = pl->logy ? 1.0 : rp_step(pl->y0, pl->y1);
	double v = ceil(pl->y0 / step - 1e-9) * step;
	double x0 = RP_SVG_ML, x1 = pl->w - RP_SVG_MR;

	for (; v <= pl->y1 + 1e-9 * step; v += step) {
		double y = pl->logy ? rp_py(pl, pow(10.0, v)) : rp_py(pl, v);

		fprintf(pl->f, "<line x1=\"%.1f\" y1=\"%.1f\" x2=\"%.1f\" "
			"y2=\"%.1f\" stroke=\"#ddd\"/>", x0, y, x1, y);
		fprintf(pl->f, "<text x=\"%.1f\" y=\"%.1f\" text-anchor=\"end\" "
			RP_FONT ">", x0 - 6, y + 4);
		if (pl->logy && fabs(v) >= 5)
			fprintf(pl->f, "1e%.0f", v);
		else if (pl->logy)
			fprintf(pl->f, "%g", pow(10.0, v));
		else
			fprintf(pl->f, "%g", fabs(v) < 1e-9 * step ? 0.0 : v);
		fputs("</text>\n", pl->f);
	}
}

static void rp_xticks(const struct rp_plot *pl, rp_tick_fn *xfmt,
		      const void *ctx)
{
	double step = rp_step(pl->x0, pl->x1);
	double v = ceil(pl->x0 / step - 1e-9) * step;
	double yb = pl->h - RP_SVG_MB;
	char buf[64];

	for (; v <= pl->x1 + 1e-9 * step; v += step) {
		double x = rp_px(pl, v);

		if (xfmt != NULL)
			xfmt(ctx, v, buf, sizeof buf);
		else
			snprintf(buf, sizeof buf, "%g",
				 fabs(v) < 1e-9 * step ? 0.0 : v);
		fprintf(pl->f, "<line x1=\"%.1f\" y1=\"%.1f\" x2=\"%.1f\" "
			"y2=\"%.1f\" stroke=\"#ddd\"/>", x, RP_SVG_MT, x, yb);
		fprintf(pl->f, "<text x=\"%.1f\" y=\"%.1f\" text-anchor="
			"\"middle\" " RP_FONT ">", x, yb + 16);
		rp_xml_text(pl->f, buf);
		fputs("</text>\n", pl->f);
	}
}

void rp_svg_axes(const struct rp_plot *pl, const char *xlabel,
		 const char *ylabel, rp_tick_fn *xfmt, const void *ctx)
{
	double yb = pl->h - RP_SVG_MB, ym = (RP_SVG_MT + yb) / 2;

	rp_yticks(pl);
	rp_xticks(pl, xfmt, ctx);
	fprintf(pl->f, "<rect x=\"%.1f\" y=\"%.1f\" width=\"%.1f\" "
		"height=\"%.1f\" fill=\"none\" stroke=\"#444\"/>\n", RP_SVG_ML,
		RP_SVG_MT, pl->w - RP_SVG_ML - RP_SVG_MR, yb - RP_SVG_MT);
	fprintf(pl->f, "<text x=\"%.1f\" y=\"%.1f\" text-anchor=\"middle\" "
		RP_FONT ">", (RP_SVG_ML + pl->w - RP_SVG_MR) / 2, pl->h - 6);
	rp_xml_text(pl->f, xlabel);
	fprintf(pl->f, "</text>\n<text transform=\"translate(16 %.1f) "
		"rotate(-90)\" text-anchor=\"middle\" " RP_FONT ">", ym);
	rp_xml_text(pl->f, ylabel);
	fputs("</text>\n", pl->f);
}
