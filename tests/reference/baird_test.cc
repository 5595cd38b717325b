// Outside checks on Baird's counterexample, as given in Sutton & Barto, "Reinforcement
// Learning: An Introduction", 2nd ed., 2018, Section 11.2 (Figure 11.1: the MDP; Figure
// 11.2: semi-gradient off-policy TD diverges), Section 11.7 (Figure 11.5: TDC) and Section
// 11.8 (Figure 11.6: emphatic TD in expectation). Step sizes are the figures' (from memory
// of the book): TD alpha 0.01; TDC alpha 0.005, beta 0.05; emphatic TD alpha 0.03.
//
// Seven states; features (w_1..w_8): state i = 1..6 has 2 w_i + w_8, state 7 has
// w_7 + 2 w_8. Two actions: dashed goes to one of states 1..6 uniformly, solid to state 7.
// Behavior: dashed with probability 6/7, solid 1/7 (so the next state is uniform over the
// seven, and so is the behavior's state distribution mu). Target: always solid. Reward 0,
// gamma 0.99, so v_pi = 0. The book starts from w0 = (1,1,1,1,1,1,10,1): values 3 for
// states 1..6 and 12 for state 7.
//
// Every feature vector has |x|^2 = 5, and the engine's FIXED step is step_size / |x|^2,
// so step_size = 5 alpha (and secondary_step_size = 5 beta).
//
// The start. The engine starts its weights at zero, where nothing would happen (with
// reward 0 the zero vector is a fixed point of every learner here), and there is no API to
// set initial weights. The question is therefore first trained by supervised regression
// onto the book's initial VALUES: a `phase` signal that ends the return on every step
// (terminate_when phase > 0.5, so gamma = 0 and the TD target is the cumulant alone),
// frames cycling through random states, the cumulant carrying 3 or 12 for the state just
// left, the solid action with behavior probability 1 (rho = 1). Then a restart, and the
// book's process with phase 0 (terminate_when never holds, so gamma = 0.99 throughout).
// From zero, regression stays in the row space of the 7 x 8 feature matrix Phi and
// reaches w0' = pinv(Phi) Phi w0 = w0 - (44/26) n, where n = (1,1,1,1,1,1,4,-2) spans
// Phi's null space. That changes nothing that is measured: every update of every learner
// here moves w along feature vectors, i.e. within the row space, so the values Phi w_t
// (and so the value error and the projected Bellman error) follow exactly the same
// trajectory as from w0; the weights differ from the book's by the constant (44/26) n.
// (Side effect: the cumulant's largest magnitude becomes 12, so the divergence guard's
// bound, 10 x max(1, max |c|) x 1/(1 - gamma), is 12,000 rather than 1,000.)
#include <algorithm>
#include <cmath>
#include <complex>
#include <cstdint>
#include <cstdio>
#include <memory>
#include <random>
#include <string>
#include <vector>

#include "Eigen/Core"
#include "Eigen/Eigenvalues"
#include "Eigen/QR"
#include "core/pool.h"
#include "gtest/gtest.h"

namespace bellwether {
namespace {

constexpr int kNumStates = 7;
constexpr int kNumFeatures = 8;
constexpr int kState7 = 6;  // index of state 7
constexpr double kGamma = 0.99;
constexpr uint32_t kDashed = 0, kSolid = 1;
constexpr double kMuDashed = 6.0 / 7.0, kMuSolid = 1.0 / 7.0;
constexpr double kNormSq = 5.0;  // |x|^2 of every feature vector
constexpr int kPrepareSteps = 20000;

using FeatureMatrix = Eigen::Matrix<double, kNumStates, kNumFeatures>;

FeatureMatrix Phi() {
  FeatureMatrix phi = FeatureMatrix::Zero();
  for (int s = 0; s < 6; ++s) {
    phi(s, s) = 2;
    phi(s, 7) = 1;
  }
  phi(kState7, 6) = 1;
  phi(kState7, 7) = 2;
  return phi;
}

Eigen::VectorXd BookInitialWeights() {
  Eigen::VectorXd w0(kNumFeatures);
  w0 << 1, 1, 1, 1, 1, 1, 10, 1;
  return w0;
}

// The value error sqrt(VE) = ||v_w - v_pi||_mu with v_pi = 0, mu uniform (S&B eq. 9.1).
double RootValueError(const Eigen::VectorXd& w) {
  return std::sqrt((Phi() * w).squaredNorm() / kNumStates);
}

// The projected Bellman error sqrt(PBE) = ||Pi delta_w||_mu (S&B Section 11.4; the
// PBE's equation there is 11.22, from memory),
// delta_w(s) = E_pi[R + gamma v(S') | s] - v(s) = gamma v(7) - v(s) (the target policy
// always goes to state 7), Pi the mu-weighted projection onto the span of the features,
// computed as a least-squares fit (Phi^T D Phi is singular here: Phi has rank 7). With
// seven states and rank-7 features the projection is the identity, so this is also the
// Bellman error; it is computed in general form all the same.
double RootProjectedBellmanError(const Eigen::VectorXd& w) {
  const Eigen::MatrixXd phi = Phi();
  const Eigen::VectorXd v = phi * w;
  Eigen::VectorXd delta(kNumStates);
  for (int s = 0; s < kNumStates; ++s) delta[s] = kGamma * v[kState7] - v[s];
  const double root_mu = std::sqrt(1.0 / kNumStates);
  const Eigen::VectorXd theta =
      (root_mu * phi).completeOrthogonalDecomposition().solve(root_mu * delta);
  return std::sqrt((phi * theta).squaredNorm() / kNumStates);
}

// Expected-update matrices (mu uniform, P_pi: every state to state 7): the expected
// semi-gradient off-policy TD(0) update is E_mu[rho delta x] = A w with
// A = Phi^T D (gamma P_pi - I) Phi (S&B Section 11.2, the expected update of Figure
// 11.2); emphatic TD(0) weights each state by its emphasis f = (I - gamma P_pi^T)^-1 d_mu
// instead of D (Sutton, Mahmood & White, "An Emphatic Approach to the Problem of
// Off-policy Temporal-Difference Learning", JMLR 17, 2016; S&B Section 11.8).
Eigen::MatrixXd ExpectedUpdateMatrix(bool emphatic) {
  const Eigen::MatrixXd phi = Phi();
  const Eigen::MatrixXd identity = Eigen::MatrixXd::Identity(kNumStates, kNumStates);
  Eigen::MatrixXd p_pi = Eigen::MatrixXd::Zero(kNumStates, kNumStates);
  p_pi.col(kState7).setOnes();
  const Eigen::VectorXd d_mu = Eigen::VectorXd::Constant(kNumStates, 1.0 / kNumStates);
  const Eigen::VectorXd weight =
      emphatic ? Eigen::VectorXd((identity - kGamma * p_pi.transpose()).inverse() * d_mu)
               : d_mu;
  return phi.transpose() * weight.asDiagonal() * (kGamma * p_pi - identity) * phi;
}

double LargestRealPart(const Eigen::MatrixXd& a) {
  const Eigen::VectorXcd eig = Eigen::EigenSolver<Eigen::MatrixXd>(a).eigenvalues();
  double best = -1e300;
  for (Eigen::Index i = 0; i < eig.size(); ++i) best = std::max(best, eig[i].real());
  return best;
}

v1::PoolSpec BairdSpec(v1::Learner learner, double step, double secondary_step) {
  v1::PoolSpec spec;
  spec.set_name("baird");
  v1::RawSignals* raw = spec.add_features()->mutable_raw();
  raw->set_normalize(false);  // feature value = signal value
  for (int j = 1; j <= kNumFeatures; ++j) {
    v1::SignalSpec* s = spec.add_signals();
    s->set_name("x" + std::to_string(j));
    s->set_min(0);
    s->set_max(2);
    raw->add_signals("x" + std::to_string(j));
  }
  for (const char* name : {"reward", "phase"}) {
    v1::SignalSpec* s = spec.add_signals();
    s->set_name(name);
    s->set_min(0);
    s->set_max(1);
  }
  spec.add_actions("dashed");
  spec.add_actions("solid");
  v1::QuestionSpec* q = spec.add_questions();
  q->set_name("value");
  q->mutable_cumulant()->set_signal("reward");
  q->set_gamma(kGamma);
  q->set_lambda(0);
  q->set_learner(learner);
  q->set_step_rule(v1::FIXED);
  q->set_step_size(step);
  if (secondary_step > 0) q->set_secondary_step_size(secondary_step);
  q->mutable_policy()->set_action("solid");
  v1::Condition* c = q->add_terminate_when();
  c->set_signal("phase");
  c->set_op(">");
  c->set_threshold(0.5);
  return spec;
}

// One stream of Baird's process through the engine.
class BairdStream {
 public:
  explicit BairdStream(const v1::PoolSpec& spec) : phi_(Phi()) {
    auto pool = Pool::Create(spec);
    EXPECT_TRUE(pool.ok()) << pool.status();
    if (pool.ok()) pool_ = *std::move(pool);
  }
  bool ok() const { return pool_ != nullptr; }

  // Supervised phase (see the top of the file): afterwards v_w = Phi w0.
  void PrepareBookStart(std::mt19937& rng) {
    const Eigen::VectorXd v0 = phi_ * BookInitialWeights();
    std::uniform_int_distribution<int> any_state(0, kNumStates - 1);
    int prev = any_state(rng);
    Apply(prev, 0.0, /*phase=*/true, kSolid, 1.0, /*restart=*/false);
    for (int k = 0; k < kPrepareSteps; ++k) {
      const int s = any_state(rng);
      Apply(s, v0[prev], /*phase=*/true, kSolid, 1.0, /*restart=*/false);
      prev = s;
    }
  }

  // `steps` transitions of the book's process (the first call restarts into it, from a
  // state drawn from mu). Records the states and actions.
  void Behave(int steps, std::mt19937& rng) {
    std::uniform_int_distribution<int> upper(0, 5);
    std::bernoulli_distribution dashed(kMuDashed);
    if (states_.empty()) {
      state_ = std::uniform_int_distribution<int>(0, kNumStates - 1)(rng);
      Act(dashed(rng), /*restart=*/true);
    }
    for (int k = 0; k < steps; ++k) {
      state_ = actions_.back() == kDashed ? upper(rng) : kState7;
      Act(dashed(rng), /*restart=*/false);
    }
  }

  Eigen::VectorXd Weights() const {
    Eigen::VectorXd w = Eigen::VectorXd::Zero(kNumFeatures);
    const BlockParams* p = pool_->block_params("baird", 0);
    if (p == nullptr || p->rows() != kNumFeatures) {
      ADD_FAILURE() << "no weights for Baird's stream";
      return w;
    }
    for (int j = 0; j < kNumFeatures; ++j) {
      w[j] = static_cast<double>(p->row(static_cast<uint32_t>(j))[0]);
    }
    return w;
  }

  v1::QuestionProgress Progress() const {
    v1::StreamPredictions preds;
    const absl::Status status = pool_->GetPredictions("baird", &preds);
    EXPECT_TRUE(status.ok()) << status;
    return status.ok() ? preds.predictions(0).progress() : v1::QuestionProgress();
  }
  double Answer() const { return pool_->predictions("baird")[0]; }

  // The book's process so far: S_k and A_k of every frame since the restart.
  const std::vector<int>& states() const { return states_; }
  const std::vector<uint32_t>& actions() const { return actions_; }

 private:
  void Act(bool dashed, bool restart) {
    const uint32_t action = dashed ? kDashed : kSolid;
    states_.push_back(state_);
    actions_.push_back(action);
    Apply(state_, 0.0, /*phase=*/false, action, dashed ? kMuDashed : kMuSolid, restart);
  }

  void Apply(int state, double reward, bool phase, uint32_t action, double behavior_prob,
             bool restart) {
    double values[kNumFeatures + 2];
    for (int j = 0; j < kNumFeatures; ++j) values[j] = phi_(state, j);
    values[kNumFeatures] = reward;
    values[kNumFeatures + 1] = phase ? 1.0 : 0.0;
    FrameInput f;
    f.seq = ++seq_;
    f.values = values;
    f.restart = restart;
    f.action = action;
    f.behavior_prob = behavior_prob;
    const absl::Status status = pool_->Apply("baird", f);
    ASSERT_TRUE(status.ok()) << status;
  }

  std::unique_ptr<Pool> pool_;
  FeatureMatrix phi_;
  uint64_t seq_ = 0;
  int state_ = 0;
  std::vector<int> states_;
  std::vector<uint32_t> actions_;
};

// The sample-based updates in doubles over a recorded trajectory (transitions k -> k+1 of
// `states`/`actions`), from w0 with an empty trace, lambda = 0, rho_k = pi(A_k)/mu(A_k) =
// 7 for solid and 0 for dashed:
//   semi-gradient off-policy TD(0) (S&B Section 11.1, eq. 11.2 from memory):
//   w += alpha rho_k delta_k x_k
//   emphatic TD(0) (Sutton, Mahmood & White 2016, eqs. for F and M with interest 1;
//   S&B Section 11.8): F_k = rho_{k-1} gamma F_{k-1} + 1 (F_0 = 1), M_k = F_k,
//   w += alpha rho_k M_k delta_k x_k.
Eigen::VectorXd ReferenceWeights(bool emphatic, const std::vector<int>& states,
                                 const std::vector<uint32_t>& actions, size_t transitions,
                                 const Eigen::VectorXd& w0, double alpha) {
  const FeatureMatrix phi = Phi();
  Eigen::VectorXd w = w0;
  double follow_on = 0, rho_prev = 0;
  for (size_t k = 0; k < transitions; ++k) {
    const double rho = actions[k] == kSolid ? 1.0 / kMuSolid : 0.0;
    follow_on = k == 0 ? 1.0 : rho_prev * kGamma * follow_on + 1.0;
    rho_prev = rho;
    const Eigen::VectorXd x = phi.row(states[k]).transpose();
    const Eigen::VectorXd x_next = phi.row(states[k + 1]).transpose();
    const double delta = kGamma * w.dot(x_next) - w.dot(x);
    w += alpha * rho * (emphatic ? follow_on : 1.0) * delta * x;
  }
  return w;
}

// Checks a prepared stream's start against the book (values 3 and 12) and against the
// closed form of the regression's limit, w0' = pinv(Phi) Phi w0 = w0 - (44/26) n. Float
// weights and a finite regression: 1e-4 (measured: at most 2.3e-5).
void ExpectBookStart(const BairdStream& stream) {
  const Eigen::VectorXd w = stream.Weights();
  const Eigen::VectorXd v = Phi() * w;
  for (int s = 0; s < 6; ++s) EXPECT_NEAR(v[s], 3.0, 1e-4) << "state " << s + 1;
  EXPECT_NEAR(v[kState7], 12.0, 1e-4);
  const Eigen::MatrixXd phi = Phi();
  const Eigen::VectorXd w0_row_space =
      phi.completeOrthogonalDecomposition().solve(phi * BookInitialWeights());
  EXPECT_LT((w - w0_row_space).cwiseAbs().maxCoeff(), 1e-4) << w.transpose();
  Eigen::VectorXd null(kNumFeatures);
  null << 1, 1, 1, 1, 1, 1, 4, -2;
  EXPECT_LT((w - (BookInitialWeights() - 44.0 / 26.0 * null)).cwiseAbs().maxCoeff(), 1e-4);
  EXPECT_NEAR(RootValueError(w), std::sqrt(198.0 / 7.0), 1e-4);
}

// Semi-gradient off-policy TD(0) diverges (S&B Section 11.2, Figure 11.2, alpha = 0.01).
// Closed form: the expected update w += alpha A w has an eigenvalue of A with positive
// real part (0.239), so it diverges for every alpha > 0 from almost every start; from the
// book's start it reaches sqrt(VE) = 581 after 1,000 steps (start: 5.3).
// Engine: (1) for the first 1,000 steps (before the guard acts) its weights are the sample
// TD(0) recursion's on the same trajectory, to float round-off (1e-4 relative; measured
// at most 1e-6 relative over 12 seeds); (2) its value error after those 1,000 steps is
// within a factor of 3 of the expected update's (measured over 12 seeds: 329 to 710);
// (3) by 20,000 steps the divergence guard has reset the question (measured: first reset
// between steps 2,000 and 3,000; 14 to 20 resets by 20,000), and the answers stay finite
// and within the guard's bound.
TEST(Baird, SemiGradientOffPolicyTdDivergesAndTheGuardCatchesIt) {
  const Eigen::MatrixXd a = ExpectedUpdateMatrix(/*emphatic=*/false);
  EXPECT_GT(LargestRealPart(a), 1e-3);
  Eigen::VectorXd expected = BookInitialWeights();
  for (int k = 0; k < 1000; ++k) expected += 0.01 * a * expected;
  const double expected_error = RootValueError(expected);
  EXPECT_GT(expected_error, 100 * RootValueError(BookInitialWeights()));

  constexpr double kAlpha = 0.01;
  BairdStream stream(BairdSpec(v1::TD, kNormSq * kAlpha, 0));
  ASSERT_TRUE(stream.ok());
  std::mt19937 rng(112);
  stream.PrepareBookStart(rng);
  ExpectBookStart(stream);
  const Eigen::VectorXd start = stream.Weights();

  stream.Behave(1000, rng);
  ASSERT_EQ(stream.Progress().divergence_resets(), 0u);
  const Eigen::VectorXd w = stream.Weights();
  const Eigen::VectorXd ref = ReferenceWeights(false, stream.states(), stream.actions(), 1000,
                                               start, kAlpha);
  std::printf("TD: sqrt(VE) after 1000 steps %.1f (expected update %.1f), max |w - ref| %.3g\n",
              RootValueError(w), expected_error, (w - ref).cwiseAbs().maxCoeff());
  EXPECT_LT((w - ref).cwiseAbs().maxCoeff(), 1e-4 * std::max(1.0, ref.cwiseAbs().maxCoeff()));
  EXPECT_GT(RootValueError(w), expected_error / 3);
  EXPECT_LT(RootValueError(w), expected_error * 3);

  stream.Behave(19000, rng);
  const v1::QuestionProgress progress = stream.Progress();
  std::printf("TD: after 20000 steps: %lu resets, step scale %.3g, sqrt(VE) %.1f\n",
              static_cast<unsigned long>(progress.divergence_resets()), progress.step_scale(),
              RootValueError(stream.Weights()));
  EXPECT_GT(progress.divergence_resets(), 0u);
  EXPECT_LT(progress.step_scale(), 1.0);
  // The guard's bound (block_learner.h): 10 x max(1, max |c| = 12) x 1 / (1 - gamma).
  const double guard_bound = 10 * 12.0 / (1 - kGamma);
  EXPECT_TRUE(std::isfinite(stream.Answer()));
  EXPECT_LE(std::fabs(stream.Answer()), guard_bound);
  EXPECT_TRUE(stream.Weights().allFinite());
}

// TDC (S&B Section 11.7, Figure 11.5, alpha = 0.005, beta = 0.05) stays bounded and
// drives the projected Bellman error to zero. Closed form first (the figure's expected
// version, which checks the error measures used here against the book): synchronous
// expected TDC updates from the book's start give sqrt(PBE) near 0 after 1,000 steps
// (0.0074) while sqrt(VE) "remains almost 2" (1.94): it is still converging to v = 0, very
// slowly. Engine: sqrt(PBE) falls from 8.2 at the start to under 0.05 by 4,000 steps
// (measured over 12 seeds: 0.0005 to 0.018 at 4,000 steps, 0.04 to 0.22 at 1,000); its
// value error ends between 0.13 and 4.1 depending on the seed (always below its start of
// 5.3), and is asserted bounded: under 10 at every check (TD's is in the hundreds by then).
TEST(Baird, TdcDrivesProjectedBellmanErrorToZero) {
  constexpr double kAlpha = 0.005, kBeta = 0.05;
  {
    // Expected TDC: w += alpha (A w - gamma Phi^T P_pi^T D Phi h),
    //               h += beta (A w - Phi^T D Phi h)   (E[rho delta x] = A w).
    const Eigen::MatrixXd phi = Phi();
    Eigen::MatrixXd p_pi = Eigen::MatrixXd::Zero(kNumStates, kNumStates);
    p_pi.col(kState7).setOnes();
    const Eigen::MatrixXd a = ExpectedUpdateMatrix(/*emphatic=*/false);
    const Eigen::MatrixXd c = phi.transpose() * phi / kNumStates;
    const Eigen::MatrixXd g = kGamma * phi.transpose() * p_pi.transpose() * phi / kNumStates;
    Eigen::VectorXd w = BookInitialWeights(), h = Eigen::VectorXd::Zero(kNumFeatures);
    for (int k = 0; k < 1000; ++k) {
      const Eigen::VectorXd aw = a * w;
      w += kAlpha * (aw - g * h);
      h += kBeta * (aw - c * h);
    }
    EXPECT_LT(RootProjectedBellmanError(w), 0.01);
    EXPECT_NEAR(RootValueError(w), 2.0, 0.1);
  }
  BairdStream stream(BairdSpec(v1::TDC, kNormSq * kAlpha, kNormSq * kBeta));
  ASSERT_TRUE(stream.ok());
  std::mt19937 rng(115);
  stream.PrepareBookStart(rng);
  ExpectBookStart(stream);
  EXPECT_NEAR(RootProjectedBellmanError(stream.Weights()), 8.2214, 1e-3);

  double last = 0;
  for (int chunk = 1; chunk <= 8; ++chunk) {
    stream.Behave(500, rng);
    const Eigen::VectorXd w = stream.Weights();
    last = RootProjectedBellmanError(w);
    EXPECT_LT(RootValueError(w), 10.0) << "after " << chunk * 500 << " steps";
    EXPECT_LT(w.cwiseAbs().maxCoeff(), 20.0) << "after " << chunk * 500 << " steps";
  }
  std::printf("TDC: sqrt(PBE) after 4000 steps %.4f, sqrt(VE) %.3f\n", last,
              RootValueError(stream.Weights()));
  EXPECT_LT(last, 0.05);
  EXPECT_EQ(stream.Progress().divergence_resets(), 0u);
}

// Emphatic TD(0) (S&B Section 11.8, Figure 11.6, alpha = 0.03, in expectation). Closed
// form: the expected emphatic update is stable (every eigenvalue of its matrix has real
// part <= 0; the zero one is Phi's null space) and from the book's start it takes the
// value error to zero (under 1e-6 within 1,000 steps).
// The sample algorithm has so much variance on this problem that the book calls
// consistent results nigh impossible: the follow-on trace grows by a factor 6.93 on every
// solid step, so its mean at state 7 (694) comes from rare long runs of solid actions.
// Measured with the engine: at alpha = 0.03, sqrt(VE) after 500 steps was 23 to 3,400
// over 12 seeds (start 5.3), and the values passed the guard's bound within 840 to 1,760
// steps (8 seeds); at alphas down to 0.0001 and up to 400,000 steps it wandered between 2
// and 10^4 and never settled towards 0. So the sample version's value error is not
// asserted. What is asserted: the engine computes exactly the paper's sample emphatic
// TD(0) on the trajectory it was given (ReferenceWeights, in doubles; float round-off
// 1e-4 relative, measured at most 1.5e-6 before the first reset, 8 seeds), over the
// first 500 steps, before any guard reset.
TEST(Baird, EmphaticTdIsStableInExpectationAndEngineFollowsItsEquations) {
  constexpr double kAlpha = 0.03;
  const Eigen::MatrixXd a = ExpectedUpdateMatrix(/*emphatic=*/true);
  EXPECT_LE(LargestRealPart(a), 1e-9);
  Eigen::VectorXd expected = BookInitialWeights();
  for (int k = 0; k < 1000; ++k) expected += kAlpha * a * expected;
  EXPECT_LT(RootValueError(expected), 1e-6);

  BairdStream stream(BairdSpec(v1::EMPHATIC_TD, kNormSq * kAlpha, 0));
  ASSERT_TRUE(stream.ok());
  std::mt19937 rng(116);
  stream.PrepareBookStart(rng);
  ExpectBookStart(stream);
  const Eigen::VectorXd start = stream.Weights();
  stream.Behave(500, rng);
  ASSERT_EQ(stream.Progress().divergence_resets(), 0u);
  const Eigen::VectorXd w = stream.Weights();
  const Eigen::VectorXd ref = ReferenceWeights(true, stream.states(), stream.actions(), 500,
                                               start, kAlpha);
  std::printf("ETD: sqrt(VE) after 500 steps %.2f (reference %.2f), max |w - ref| %.3g\n",
              RootValueError(w), RootValueError(ref), (w - ref).cwiseAbs().maxCoeff());
  EXPECT_LT((w - ref).cwiseAbs().maxCoeff(), 1e-4 * std::max(1.0, ref.cwiseAbs().maxCoeff()));
}

}  // namespace
}  // namespace bellwether
