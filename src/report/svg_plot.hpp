// A small SVG line/scatter plot writer for the report: axes with ticks and labels (units on every axis),
// lines, points, a shaded band, a legend. Colours from the Okabe–Ito colour-blind-safe palette.
#pragma once

#include <string>
#include <vector>

namespace loadtrim::report {

inline const char* const kPalette[] = {"#0072B2", "#E69F00", "#009E73", "#CC79A7",
                                       "#56B4E9", "#D55E00", "#F0E442", "#000000"};

struct Series {
  std::string label;
  std::vector<double> x, y;
  std::string colour = "#0072B2";
  double width = 1.5;
  bool points = false;  // markers instead of a line
  bool dashed = false;
  std::string dash = "";  // a stroke-dasharray of its own (overrides `dashed`), e.g. "2,3"
  std::string cls = "";   // a class for the drawn element (tests find the tolerance line by it)
};

struct Band {  // a shaded region between two curves over the same x
  std::string label;
  std::vector<double> x, lo, hi;
  std::string colour = "#999999";
  bool edges = false;  // also stroke its two edges, so that a band a few pixels high stays visible
};

class SvgPlot {
 public:
  SvgPlot(std::string id, std::string title, std::string x_label, std::string y_label, int width = 720,
          int height = 360)
      : id_(std::move(id)),
        title_(std::move(title)),
        xl_(std::move(x_label)),
        yl_(std::move(y_label)),
        w_(width),
        h_(height) {}
  void add(Series s) { series_.push_back(std::move(s)); }
  void add(Band b) { bands_.push_back(std::move(b)); }
  // Ticks on whole numbers only (a count such as the coast-down number).
  void integer_x() { integer_x_ = true; }
  // The y axis reaches at least this value (a margin above a line that must not sit on the frame).
  void include_y(double y) { extra_y_.push_back(y); }
  std::string render() const;

 private:
  std::string id_, title_, xl_, yl_;
  int w_, h_;
  std::vector<Series> series_;
  std::vector<Band> bands_;
  bool integer_x_ = false;
  std::vector<double> extra_y_;
};

std::string xml_escape(const std::string& s);

}  // namespace loadtrim::report
