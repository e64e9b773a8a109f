// bench_timing.h: the benchmarks' clock.
//
// Each benchmark times a run with both the wall clock and the calling
// thread's CPU clock (CLOCK_THREAD_CPUTIME_ID). The development machine is
// shared, and while other jobs run a single-threaded run is descheduled for
// part of its wall time; the thread's CPU time leaves that time out. The
// Python drivers compare CPU time with CPU time (time.process_time() for
// SciPy), and report wall time beside it. Fastest of several runs for both.
#pragma once

#include <time.h>

#include <chrono>

namespace plumbline::bench {

struct stopwatch {
  struct reading {
    double wall = 0;
    double cpu = 0;
  };
  static double thread_cpu() {
    timespec ts{};
    clock_gettime(CLOCK_THREAD_CPUTIME_ID, &ts);
    return static_cast<double>(ts.tv_sec) + 1e-9 * static_cast<double>(ts.tv_nsec);
  }
  stopwatch() : wall0_(std::chrono::steady_clock::now()), cpu0_(thread_cpu()) {}
  reading elapsed() const {
    return {std::chrono::duration<double>(std::chrono::steady_clock::now() - wall0_).count(),
            thread_cpu() - cpu0_};
  }

 private:
  std::chrono::steady_clock::time_point wall0_;
  double cpu0_;
};

}  // namespace plumbline::bench
