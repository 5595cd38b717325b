#include "core/io/json_syntax.h"

#include <string>

#include "core/io/spec_json.h"
#include "gmock/gmock.h"
#include "gtest/gtest.h"

namespace bellwether {
namespace {

using ::testing::HasSubstr;

// Valid and invalid documents follow the grammar of RFC 8259 (T. Bray, "The JavaScript
// Object Notation (JSON) Data Interchange Format", 2017), sections 2-7.
TEST(JsonSyntax, AcceptsWellFormedDocuments) {
  for (const char* ok : {"{}", "[]", " {\"a\": [1, -2.5e+3, 0, true, false, null]} ",
                         "\"\\u00e9\\n\\\"\"", "-0.0", "{\"a\":{\"b\":[{}]}}", "1E9"}) {
    EXPECT_TRUE(CheckJsonSyntax(ok).ok()) << ok << ": " << CheckJsonSyntax(ok);
  }
}

TEST(JsonSyntax, NamesLineAndColumnOfTheFirstError) {
  struct Case {
    const char* json;
    const char* where;
    const char* why;
  };
  const Case cases[] = {
      {"{\"a\": 1,\n \"b\" 2}", "line 2, column 6", "expected ':'"},
      {"{\"a\": 1\n \"b\": 2}", "line 2, column 2", "expected ',' or '}'"},
      {"[1, 2,]", "line 1, column 7", "trailing ','"},
      {"{\"a\": 01}", "line 1, column 8", "leading zeros"},
      {"{\"a\": \"x\ny\"}", "line 1, column 9", "control character"},
      {"{\"a\": tru}", "line 1, column 7", "expected a value"},
      {"{\"a\": 1} x", "line 1, column 10", "after the JSON value"},
      {"{\"a\": \"open", "line 1, column 12", "not closed"},
      {"{\"a\": 1.}", "line 1, column 9", "expected a digit"},
      {"{'a': 1}", "line 1, column 2", "expected a \"key\""},
      {"", "line 1, column 1", "expected a value"},
  };
  for (const Case& c : cases) {
    const absl::Status s = CheckJsonSyntax(c.json);
    EXPECT_EQ(s.code(), absl::StatusCode::kInvalidArgument) << c.json;
    EXPECT_THAT(s.message(), HasSubstr(c.where)) << c.json;
    EXPECT_THAT(s.message(), HasSubstr(c.why)) << c.json;
  }
}

TEST(JsonSyntax, RefusesDeepNestingWithoutOverflowingTheStack) {
  const std::string deep(100000, '[');
  EXPECT_THAT(CheckJsonSyntax(deep).message(), HasSubstr("nested more than 128"));
}

TEST(JsonSyntax, PoolSpecErrorsNameTheLine) {
  auto spec = PoolSpecFromJson("{\"name\": \"x\",\n \"signals\": [\n  {\"name\": \"a\" \"unit\": \"b\"}]}");
  ASSERT_FALSE(spec.ok());
  EXPECT_THAT(spec.status().message(), HasSubstr("line 3, column 16"));
}

}  // namespace
}  // namespace bellwether
