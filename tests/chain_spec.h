// A pool spec shared by tests of chains and walks: a `state` signal over [0, states)
// coded one-hot (one tiling, tiles of width one) and a `reward` signal as the cumulant of
// one question, `value`, with a FIXED step (learner unset means TD).
#ifndef BELLWETHER_TESTS_CHAIN_SPEC_H_
#define BELLWETHER_TESTS_CHAIN_SPEC_H_

#include "bellwether/v1/pool.pb.h"

namespace bellwether::testing {

inline v1::PoolSpec OneHotChainSpec(int states, double gamma, double lambda, double step,
                                    v1::Learner learner = v1::LEARNER_UNSPECIFIED) {
  v1::PoolSpec spec;
  spec.set_name("chain");
  v1::SignalSpec* s = spec.add_signals();
  s->set_name("state");
  s->set_min(0);
  s->set_max(states);
  v1::SignalSpec* r = spec.add_signals();
  r->set_name("reward");
  r->set_min(-1);
  r->set_max(1);
  v1::TileCoding* t = spec.add_features()->mutable_tiles();
  t->add_signals("state");
  t->set_tilings(1);
  t->set_tiles_per_dim(static_cast<uint32_t>(states));
  v1::QuestionSpec* q = spec.add_questions();
  q->set_name("value");
  q->mutable_cumulant()->set_signal("reward");
  q->set_gamma(gamma);
  q->set_lambda(lambda);
  q->set_learner(learner);
  q->set_step_rule(v1::FIXED);
  q->set_step_size(step);
  return spec;
}

}  // namespace bellwether::testing

#endif  // BELLWETHER_TESTS_CHAIN_SPEC_H_
