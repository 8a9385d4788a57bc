// A bounded multi-producer, single-consumer queue between the MQTT client's
// callback threads and the monitor thread. Producers block while it is full
// (back-pressure into the client and TCP, so nothing is dropped silently),
// unless the queue has been closed for shutdown.
#pragma once

#include <chrono>
#include <condition_variable>
#include <cstddef>
#include <deque>
#include <mutex>

namespace holdfast::daemon {

template <typename T>
class BoundedQueue {
 public:
  explicit BoundedQueue(std::size_t capacity) : capacity_(capacity) {}

  // Blocks while full. False (item dropped) once closed.
  bool Push(T item) {
    std::unique_lock<std::mutex> lock(mu_);
    not_full_.wait(lock, [&] { return closed_ || items_.size() < capacity_; });
    if (closed_) return false;
    items_.push_back(std::move(item));
    not_empty_.notify_one();
    return true;
  }
  // Waits up to `timeout` for an item.
  template <typename Rep, typename Period>
  bool PopFor(T* out, std::chrono::duration<Rep, Period> timeout) {
    std::unique_lock<std::mutex> lock(mu_);
    if (!not_empty_.wait_for(lock, timeout, [&] { return !items_.empty(); })) return false;
    *out = std::move(items_.front());
    items_.pop_front();
    not_full_.notify_one();
    return true;
  }
  bool TryPop(T* out) { return PopFor(out, std::chrono::milliseconds(0)); }
  void Close() {
    std::lock_guard<std::mutex> lock(mu_);
    closed_ = true;
    not_full_.notify_all();
  }
  std::size_t size() const {
    std::lock_guard<std::mutex> lock(mu_);
    return items_.size();
  }

 private:
  const std::size_t capacity_;
  mutable std::mutex mu_;
  std::condition_variable not_empty_, not_full_;
  std::deque<T> items_;
  bool closed_ = false;
};

}  // namespace holdfast::daemon
