#include "core/io/csv_frame_reader.h"

#include <sstream>

#include "absl/time/civil_time.h"
#include "absl/time/time.h"
#include "gmock/gmock.h"
#include "gtest/gtest.h"

namespace bellwether {
namespace {

using ::testing::ElementsAre;
using ::testing::HasSubstr;

std::unique_ptr<CsvFrameReader> Reader(const std::string& text) {
  auto r = CsvFrameReader::FromStream(std::make_unique<std::istringstream>(text), "t.csv");
  EXPECT_TRUE(r.ok()) << r.status();
  return r.ok() ? std::move(*r) : nullptr;
}

TEST(CsvFrameReader, ReadsSignalsReservedColumnsAndMissingCells) {
  auto r = Reader(
      "timestamp,power_kw,action,behavior_prob,restart,temp_c\n"
      "2000-06-05T00:30:00,12.5,2,0.25,0,\n"
      "\n"
      "2000-06-05 01:00:00,13,,,1,18\r\n");
  EXPECT_THAT(r->signal_columns(), ElementsAre("power_kw", "temp_c"));
  v1::Frame f;
  ASSERT_TRUE(*r->Next(&f));
  EXPECT_EQ(f.seq(), 1u);
  EXPECT_EQ(f.local_micros(),
            absl::ToUnixMicros(absl::FromCivil(absl::CivilSecond(2000, 6, 5, 0, 30, 0),
                                               absl::UTCTimeZone())));
  EXPECT_THAT(f.values(), ElementsAre(12.5, 0.0));
  EXPECT_THAT(f.missing(), ElementsAre(1u));
  EXPECT_EQ(f.action(), 2u);
  EXPECT_DOUBLE_EQ(f.behavior_prob(), 0.25);
  EXPECT_FALSE(f.restart());
  ASSERT_TRUE(*r->Next(&f));
  EXPECT_EQ(f.seq(), 2u);
  EXPECT_EQ(r->line(), 4u);
  EXPECT_TRUE(f.restart());
  EXPECT_FALSE(f.has_action());
  EXPECT_THAT(f.values(), ElementsAre(13.0, 18.0));
  EXPECT_FALSE(*r->Next(&f));
}

TEST(CsvFrameReader, TimestampsWithOffsetOrSecondsAreAbsolute) {
  auto r = Reader("timestamp,x\n2026-01-01T12:00:00+01:00,1\n2026-01-01T11:00:00Z,1\n1767265200,1\n");
  v1::Frame f;
  const int64_t expected = absl::ToUnixMicros(
      absl::FromCivil(absl::CivilSecond(2026, 1, 1, 11, 0, 0), absl::UTCTimeZone()));
  for (int i = 0; i < 3; ++i) {
    ASSERT_TRUE(*r->Next(&f));
    EXPECT_EQ(f.time_case(), v1::Frame::kUnixMicros);
    EXPECT_EQ(f.unix_micros(), expected) << "row " << i + 1;
  }
}

TEST(CsvFrameReader, BadRowsNameFileLineColumnAndReason) {
  v1::Frame f;
  auto r = Reader("x,y\n1,2\n3\n");
  ASSERT_TRUE(*r->Next(&f));
  EXPECT_THAT(r->Next(&f).status().message(), HasSubstr("t.csv:3: has 1 cells, the header has 2"));

  r = Reader("x,y\n1,abc\n");
  EXPECT_THAT(r->Next(&f).status().message(), HasSubstr("t.csv:2: column 'y': 'abc' is not a number"));

  r = Reader("x\nnan\n");
  EXPECT_THAT(r->Next(&f).status().message(), HasSubstr("column 'x': 'nan' is not a finite number"));

  r = Reader("x\ninf\n");
  EXPECT_THAT(r->Next(&f).status().message(), HasSubstr("column 'x': 'inf' is not a finite number"));

  r = Reader("timestamp,x\nyesterday,1\n");
  EXPECT_THAT(r->Next(&f).status().message(), HasSubstr("column 'timestamp': 'yesterday'"));

  // A year that parses but lies past any representable time is refused, not saturated
  // (found by the CSV fuzz harness: 20262026-01-01 became the largest int64).
  for (const char* far : {"20262026-01-01T00:00:00", "20262026-01-01T00:00:00Z", "1e14"}) {
    r = Reader(std::string("timestamp,x\n") + far + ",1\n");
    EXPECT_THAT(r->Next(&f).status().message(), HasSubstr("within 10^13 s of 1970")) << far;
  }

  r = Reader("restart,x\nmaybe,1\n");
  EXPECT_THAT(r->Next(&f).status().message(), HasSubstr("column 'restart'"));

  auto dup = CsvFrameReader::FromStream(std::make_unique<std::istringstream>("x,x\n"), "d.csv");
  EXPECT_THAT(dup.status().message(), HasSubstr("d.csv:1: column 'x' appears twice"));
  auto empty = CsvFrameReader::FromStream(std::make_unique<std::istringstream>(""), "e.csv");
  EXPECT_THAT(empty.status().message(), HasSubstr("e.csv: empty file"));
  EXPECT_THAT(CsvFrameReader::Open("/nonexistent/file.csv").status().message(),
              HasSubstr("/nonexistent/file.csv: cannot open"));
}

}  // namespace
}  // namespace bellwether
