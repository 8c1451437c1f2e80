#include "report/svg_plot.hpp"

#include <algorithm>
#include <cmath>
#include <cstdio>
#include <limits>

namespace loadtrim::report {

std::string xml_escape(const std::string& s) {
  std::string o;
  for (char c : s) {
    switch (c) {
      case '&':
        o += "&amp;";
        break;
      case '<':
        o += "&lt;";
        break;
      case '>':
        o += "&gt;";
        break;
      case '"':
        o += "&quot;";
        break;
      default:
        o += c;
    }
  }
  return o;
}

namespace {
double nice_step(double span, int target_ticks) {
  const double raw = span / std::max(1, target_ticks);
  const double mag = std::pow(10.0, std::floor(std::log10(raw)));
  for (double m : {1.0, 2.0, 2.5, 5.0, 10.0})
    if (raw <= m * mag) return m * mag;
  return 10.0 * mag;
}
std::string f(double v) {
  char b[32];
  std::snprintf(b, sizeof b, "%.1f", v);
  return b;
}
std::string tick_text(double v, double step) {
  char b[32];
  std::snprintf(b, sizeof b, step >= 1.0 ? "%.0f" : step >= 0.1 ? "%.1f" : "%.2f", v);
  return b;
}
}  // namespace

std::string SvgPlot::render() const {
  double x0 = std::numeric_limits<double>::infinity(), x1 = -x0, y0 = x0, y1 = -x0;
  auto extend = [&](const std::vector<double>& xs, const std::vector<double>& ys) {
    for (std::size_t i = 0; i < xs.size() && i < ys.size(); ++i) {
      if (!std::isfinite(xs[i]) || !std::isfinite(ys[i])) continue;
      x0 = std::min(x0, xs[i]);
      x1 = std::max(x1, xs[i]);
      y0 = std::min(y0, ys[i]);
      y1 = std::max(y1, ys[i]);
    }
  };
  for (const auto& s : series_) extend(s.x, s.y);
  for (const auto& b : bands_) {
    extend(b.x, b.lo);
    extend(b.x, b.hi);
  }
  for (double y : extra_y_)
    if (std::isfinite(y)) y0 = std::min(y0, y), y1 = std::max(y1, y);
  if (!std::isfinite(x0)) x0 = 0, x1 = 1, y0 = 0, y1 = 1;
  if (!std::isfinite(y0)) y0 = 0, y1 = 1;
  if (x1 - x0 < 1e-9) x1 = x0 + 1;
  if (y1 - y0 < 1e-9) y1 = y0 + 1;
  double xs = nice_step(x1 - x0, 8);
  if (integer_x_) xs = std::max(1.0, std::round(xs));
  const double ys = nice_step(y1 - y0, 6);
  x0 = std::floor(x0 / xs) * xs, x1 = std::ceil(x1 / xs) * xs;
  y0 = std::floor(y0 / ys) * ys, y1 = std::ceil(y1 / ys) * ys;
  const double L = 70, R = 20, T = 34, B = 52;
  const double pw = w_ - L - R, ph = h_ - T - B;
  auto px = [&](double x) { return L + (x - x0) / (x1 - x0) * pw; };
  auto py = [&](double y) { return T + ph - (y - y0) / (y1 - y0) * ph; };
  std::string o = "<svg xmlns=\"http://www.w3.org/2000/svg\" id=\"" + xml_escape(id_) +
                  "\" class=\"plot\" width=\"" + std::to_string(w_) + "\" height=\"" + std::to_string(h_) +
                  "\" viewBox=\"0 0 " + std::to_string(w_) + " " + std::to_string(h_) +
                  "\" font-family=\"sans-serif\" font-size=\"12\">\n";
  o += "<rect x=\"0\" y=\"0\" width=\"" + std::to_string(w_) + "\" height=\"" + std::to_string(h_) +
       "\" fill=\"#ffffff\"/>\n";
  o += "<text x=\"" + f(L) + "\" y=\"20\" font-size=\"14\" font-weight=\"bold\">" + xml_escape(title_) +
       "</text>\n";
  // Grid and ticks.
  for (double x = x0; x <= x1 + xs * 1e-6; x += xs) {
    o += "<line x1=\"" + f(px(x)) + "\" y1=\"" + f(T) + "\" x2=\"" + f(px(x)) + "\" y2=\"" + f(T + ph) +
         "\" stroke=\"#e0e0e0\"/>\n";
    o += "<text class=\"tick-x\" x=\"" + f(px(x)) + "\" y=\"" + f(T + ph + 16) +
         "\" text-anchor=\"middle\">" + tick_text(x, xs) + "</text>\n";
  }
  for (double y = y0; y <= y1 + ys * 1e-6; y += ys) {
    o += "<line x1=\"" + f(L) + "\" y1=\"" + f(py(y)) + "\" x2=\"" + f(L + pw) + "\" y2=\"" + f(py(y)) +
         "\" stroke=\"#e0e0e0\"/>\n";
    o += "<text class=\"tick-y\" x=\"" + f(L - 6) + "\" y=\"" + f(py(y) + 4) + "\" text-anchor=\"end\">" +
         tick_text(y, ys) + "</text>\n";
  }
  o += "<rect class=\"frame\" x=\"" + f(L) + "\" y=\"" + f(T) + "\" width=\"" + f(pw) + "\" height=\"" +
       f(ph) + "\" fill=\"none\" stroke=\"#333333\"/>\n";
  o += "<text class=\"axis-label\" x=\"" + f(L + pw / 2) + "\" y=\"" + f(h_ - 12) +
       "\" text-anchor=\"middle\">" + xml_escape(xl_) + "</text>\n";
  o += "<text class=\"axis-label\" transform=\"translate(16," + f(T + ph / 2) +
       ") rotate(-90)\" text-anchor=\"middle\">" + xml_escape(yl_) + "</text>\n";
  // Bands, then series.
  for (const auto& b : bands_) {
    std::string pts;
    for (std::size_t i = 0; i < b.x.size(); ++i) pts += f(px(b.x[i])) + "," + f(py(b.hi[i])) + " ";
    for (std::size_t i = b.x.size(); i-- > 0;) pts += f(px(b.x[i])) + "," + f(py(b.lo[i])) + " ";
    o += "<polygon class=\"band\" points=\"" + pts + "\" fill=\"" + b.colour + "\" fill-opacity=\"" +
         (b.edges ? "0.35" : "0.25") + "\" stroke=\"" + (b.edges ? b.colour : "none") + "\"" +
         (b.edges ? " stroke-width=\"1.2\"" : "") + "/>\n";
  }
  for (const auto& s : series_) {
    if (s.points) {
      for (std::size_t i = 0; i < s.x.size() && i < s.y.size(); ++i)
        if (std::isfinite(s.x[i]) && std::isfinite(s.y[i]))
          o += "<circle" + (s.cls.empty() ? std::string() : " class=\"" + xml_escape(s.cls) + "\"") +
               " cx=\"" + f(px(s.x[i])) + "\" cy=\"" + f(py(s.y[i])) + "\" r=\"3.5\" fill=\"" + s.colour +
               "\"/>\n";
      continue;
    }
    std::string pts;
    for (std::size_t i = 0; i < s.x.size() && i < s.y.size(); ++i)
      if (std::isfinite(s.x[i]) && std::isfinite(s.y[i])) pts += f(px(s.x[i])) + "," + f(py(s.y[i])) + " ";
    const std::string dash = !s.dash.empty() ? s.dash : s.dashed ? std::string("6,4") : std::string();
    o += "<polyline" + (s.cls.empty() ? std::string() : " class=\"" + xml_escape(s.cls) + "\"") +
         (s.label.empty() ? std::string() : " data-series=\"" + xml_escape(s.label) + "\"") + " points=\"" +
         pts + "\" fill=\"none\" stroke=\"" + s.colour + "\" stroke-width=\"" + f(s.width) + "\"" +
         (dash.empty() ? "" : " stroke-dasharray=\"" + dash + "\"") + "/>\n";
  }
  // Legend, top right inside the plot.
  double ly = T + 16;
  auto legend = [&](const std::string& label, const std::string& colour, bool box, const std::string& dash) {
    if (label.empty()) return;
    const double lx = L + pw - 190;
    o += box ? "<rect x=\"" + f(lx) + "\" y=\"" + f(ly - 9) + "\" width=\"18\" height=\"10\" fill=\"" +
                   colour + "\" fill-opacity=\"0.35\"/>\n"
             : "<line x1=\"" + f(lx) + "\" y1=\"" + f(ly - 4) + "\" x2=\"" + f(lx + 18) + "\" y2=\"" +
                   f(ly - 4) + "\" stroke=\"" + colour + "\" stroke-width=\"3\"" +
                   (dash.empty() ? "" : " stroke-dasharray=\"" + dash + "\"") + "/>\n";
    o += "<text x=\"" + f(lx + 24) + "\" y=\"" + f(ly) + "\">" + xml_escape(label) + "</text>\n";
    ly += 16;
  };
  for (const auto& b : bands_) legend(b.label, b.colour, true, "");
  for (const auto& s : series_)
    legend(s.label, s.colour, false,
           !s.dash.empty() ? s.dash
           : s.dashed      ? std::string("6,4")
                           : std::string());
  o += "</svg>\n";
  return o;
}

}  // namespace loadtrim::report
