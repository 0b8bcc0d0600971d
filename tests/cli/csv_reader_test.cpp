#include "csv_reader.h"

#include <gtest/gtest.h>

#include <sstream>
#include <string>
#include <vector>

namespace lyapcast::cli {
namespace {

using Fields = std::vector<std::string>;

struct Read {
  std::int64_t line, last_line;
  Fields fields;
  std::string error;
};

std::vector<Read> ReadAll(const std::string& text, char delimiter = ',', std::size_t max_record = 1 << 20) {
  std::istringstream in(text);
  CsvReader reader(in, delimiter, max_record);
  std::vector<Read> out;
  CsvRecord r;
  while (reader.Next(r)) out.push_back({r.line, r.last_line, r.fields, r.error});
  EXPECT_EQ(reader.bytes_read(), text.size());
  return out;
}

TEST(CsvReader, PlainRecordsLfCrlfAndNoFinalNewline) {
  const auto r = ReadAll("t,a,b\r\n1,2,3\n4,,6");
  ASSERT_EQ(r.size(), 3u);
  EXPECT_EQ(r[0].fields, (Fields{"t", "a", "b"}));
  EXPECT_EQ(r[1].fields, (Fields{"1", "2", "3"}));
  EXPECT_EQ(r[2].fields, (Fields{"4", "", "6"}));
  EXPECT_EQ(r[2].line, 3);
  EXPECT_TRUE(r[2].error.empty());
}

TEST(CsvReader, EmptyInputAndBlankLines) {
  EXPECT_TRUE(ReadAll("").empty());
  const auto r = ReadAll("a\n\n\nb\n");
  ASSERT_EQ(r.size(), 4u);
  EXPECT_EQ(r[1].fields, (Fields{""}));
  EXPECT_EQ(r[3].fields, (Fields{"b"}));
  EXPECT_EQ(r[3].line, 4);
}

TEST(CsvReader, TrailingDelimiterIsAnEmptyField) {
  const auto r = ReadAll("a,b,\n,\n");
  EXPECT_EQ(r[0].fields, (Fields{"a", "b", ""}));
  EXPECT_EQ(r[1].fields, (Fields{"", ""}));
}

TEST(CsvReader, QuotedFieldsWithDelimitersAndDoubledQuotes) {
  const auto r = ReadAll("\"a,b\",\"say \"\"hi\"\"\",\"\",plain\n");
  ASSERT_EQ(r.size(), 1u);
  EXPECT_EQ(r[0].fields, (Fields{"a,b", "say \"hi\"", "", "plain"}));
}

TEST(CsvReader, QuotedLineBreakKeepsTheRecordAndCountsLines) {
  const auto r = ReadAll("h1,\"two\r\nlines\"\n1,2\n");
  ASSERT_EQ(r.size(), 2u);
  EXPECT_EQ(r[0].fields, (Fields{"h1", "two\nlines"}));
  EXPECT_EQ(r[0].line, 1);
  EXPECT_EQ(r[0].last_line, 2);
  EXPECT_EQ(r[1].fields, (Fields{"1", "2"}));
  EXPECT_EQ(r[1].line, 3);
}

TEST(CsvReader, BlanksAroundQuotedFieldsAreDropped) {
  const auto r = ReadAll("a, \"b c\" ,  d \n");
  EXPECT_EQ(r[0].fields, (Fields{"a", "b c", "  d "}));  // unquoted blanks are kept (the caller trims)
}

TEST(CsvReader, QuoteInsideUnquotedFieldIsText) {
  const auto r = ReadAll("5\" pipe,x\n");
  EXPECT_EQ(r[0].fields, (Fields{"5\" pipe", "x"}));
}

TEST(CsvReader, TextAfterClosingQuoteIsAnErrorOfThatRecordOnly) {
  const auto r = ReadAll("\"a\"b,c\nd,e\n");
  ASSERT_EQ(r.size(), 2u);
  EXPECT_NE(r[0].error.find("text after the closing quote of field 1"), std::string::npos) << r[0].error;
  EXPECT_TRUE(r[0].fields.empty());
  EXPECT_EQ(r[1].fields, (Fields{"d", "e"}));
  EXPECT_EQ(r[1].line, 2);
}

TEST(CsvReader, UnclosedQuoteCostsOneRecordAndReadingResumesOnTheNextLine) {
  const auto r = ReadAll("t,v\n1,\"oops\n2,3\n4,5\n");
  ASSERT_EQ(r.size(), 4u);
  EXPECT_EQ(r[1].line, 2);
  EXPECT_NE(r[1].error.find("field 2 opens a quote"), std::string::npos) << r[1].error;
  EXPECT_NE(r[1].error.find("end of the file"), std::string::npos) << r[1].error;
  EXPECT_EQ(r[2].fields, (Fields{"2", "3"}));
  EXPECT_EQ(r[2].line, 3);
  EXPECT_EQ(r[3].fields, (Fields{"4", "5"}));
  EXPECT_EQ(r[3].line, 4);
}

TEST(CsvReader, QuoteClosedOnALaterLineWithTextAfterItCostsOneLine) {
  const auto r = ReadAll("t,v\n1,\"2\n3,4\n5,\"6\"\n");
  ASSERT_EQ(r.size(), 4u);
  EXPECT_EQ(r[1].line, 2);
  EXPECT_EQ(r[1].last_line, 2);
  EXPECT_NE(r[1].error.find("field 2 opens a quote ('\"') that closes on line 4 with text after it"), std::string::npos)
      << r[1].error;
  EXPECT_EQ(r[2].fields, (Fields{"3", "4"}));
  EXPECT_EQ(r[2].line, 3);
  EXPECT_EQ(r[3].fields, (Fields{"5", "6"}));
}

TEST(CsvReader, GiveBackContinuationRereadsTheLinesAfterTheFirst) {
  std::istringstream in("t,v\n1,\"a\n2,3\n4,\"\n5,6\n");
  CsvReader reader(in);
  CsvRecord r;
  ASSERT_TRUE(reader.Next(r));
  EXPECT_FALSE(reader.GiveBackContinuation());  // one line: nothing to give back
  ASSERT_TRUE(reader.Next(r));
  EXPECT_EQ(r.fields, (Fields{"1", "a\n2,3\n4,"}));  // valid CSV, but swallowed two lines
  EXPECT_EQ(r.line, 2);
  EXPECT_EQ(r.last_line, 4);
  EXPECT_TRUE(reader.GiveBackContinuation());
  EXPECT_FALSE(reader.GiveBackContinuation());
  ASSERT_TRUE(reader.Next(r));
  EXPECT_EQ(r.fields, (Fields{"2", "3"}));
  EXPECT_EQ(r.line, 3);
  ASSERT_TRUE(reader.Next(r));  // line 4 opens a quote again: not closed by the end
  EXPECT_EQ(r.line, 4);
  EXPECT_NE(r.error.find("not closed by the end of the file"), std::string::npos) << r.error;
  ASSERT_TRUE(reader.Next(r));
  EXPECT_EQ(r.fields, (Fields{"5", "6"}));
  EXPECT_EQ(r.line, 5);
  EXPECT_FALSE(reader.Next(r));
}

TEST(CsvReader, UnclosedQuoteWithinTheRecordLimit) {
  std::string text = "a,\"open\n";
  for (int i = 0; i < 100; ++i) text += "1,2\n";
  const auto r = ReadAll(text, ',', 64);
  ASSERT_EQ(r.size(), 101u);
  EXPECT_NE(r[0].error.find("within 64 bytes"), std::string::npos) << r[0].error;
  EXPECT_EQ(r[1].line, 2);
  EXPECT_EQ(r[100].line, 101);
  EXPECT_EQ(r[100].fields, (Fields{"1", "2"}));
}

TEST(CsvReader, SemicolonAndTabDelimiters) {
  const auto s = ReadAll("t;v\n1;\"2;3\"\n", ';');
  EXPECT_EQ(s[1].fields, (Fields{"1", "2;3"}));
  const auto t = ReadAll("t\tv\n1\t \"x\"\n", '\t');
  EXPECT_EQ(t[0].fields, (Fields{"t", "v"}));
  EXPECT_EQ(t[1].fields, (Fields{"1", "x"}));
}

TEST(CsvReader, ByteOrderMarkIsSkipped) {
  const auto r = ReadAll("\xEF\xBB\xBFtime,a\n1,2\n");
  EXPECT_EQ(r[0].fields, (Fields{"time", "a"}));
}

}  // namespace
}  // namespace lyapcast::cli
