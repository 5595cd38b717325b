#include "core/spec_diff.h"

#include "google/protobuf/util/message_differencer.h"

namespace bellwether {
namespace {

using google::protobuf::util::MessageDifferencer;

v1::PoolSpec RecipePart(const v1::PoolSpec& p) {
  v1::PoolSpec out = p;
  out.clear_name();
  out.clear_questions();
  for (v1::SignalSpec& s : *out.mutable_signals()) s.clear_unit();
  return out;
}

v1::QuestionSpec LearningPart(const v1::QuestionSpec& q) {
  v1::QuestionSpec out = q;
  out.clear_unit();
  return out;
}

}  // namespace

SpecDiff DiffPoolSpecs(const v1::PoolSpec& old, const v1::PoolSpec& next) {
  SpecDiff d;
  d.recipe_changed = !MessageDifferencer::Equals(RecipePart(old), RecipePart(next));
  for (const v1::QuestionSpec& n : next.questions()) {
    const v1::QuestionSpec* match = nullptr;
    for (const v1::QuestionSpec& o : old.questions()) {
      if (o.name() == n.name()) match = &o;
    }
    if (match == nullptr) {
      d.added.push_back(n.name());
    } else if (d.recipe_changed ||
               !MessageDifferencer::Equals(LearningPart(*match), LearningPart(n))) {
      d.changed.push_back(n.name());
    } else {
      d.unchanged.push_back(n.name());
    }
  }
  for (const v1::QuestionSpec& o : old.questions()) {
    bool kept = false;
    for (const v1::QuestionSpec& n : next.questions()) kept |= (n.name() == o.name());
    if (!kept) d.retired.push_back(o.name());
  }
  return d;
}

}  // namespace bellwether
