#pragma once
// Internal: results sent between ranks, every field bit for bit (a rank that receives a
// solution must be able to warm-start from it and report it exactly as its owner would).
#include <string>

#include "common/bytes.hpp"
#include "stillpoint/ks/scf.hpp"

namespace stillpoint::detail {

void write_warm_starts(ByteWriter& w, const std::vector<EigenWarmStart>& warm);
std::vector<EigenWarmStart> read_warm_starts(ByteReader& r);

void write_solution(ByteWriter& w, const KsSolution& s);
KsSolution read_solution(ByteReader& r);

std::string pack_solution(const KsSolution& s);
KsSolution unpack_solution(const std::string& bytes);

}  // namespace stillpoint::detail
