// NIST SRD 141 rows beyond Mg, recalled from the database's element pages (label: from memory;
// basis-data/reference/nist-lda-lsd-memory.csv says which and reports the one recalled value
// that disagrees). A second line of evidence beside the Mg/Mg+ rows read from the NIST page.
#include <gtest/gtest.h>

#include "stillpoint/check/reference_check.hpp"

namespace sp = stillpoint;

TEST(NistFromMemory, RecalledRowsWithinMicroHartree) {
  const auto rows = sp::read_reference_table(STILLPOINT_SOURCE_DIR "/basis-data/reference/nist-lda-lsd-memory.csv");
  ASSERT_EQ(rows.size(), 12u);
  sp::CheckOptions opt;
  opt.tolerance = 1e-6;
  const sp::CheckReport rep = sp::run_reference_check(rows, opt);
  EXPECT_EQ(rep.n_failed, 0) << sp::format_check_table(rep, opt.tolerance);
}
