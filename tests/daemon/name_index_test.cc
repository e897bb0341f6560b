// NameIndex: finds what was inserted and nothing else, through growth and
// through erasures in any order (backward-shift deletion must leave every
// remaining probe run unbroken). Checked against std::map as the reference
// (common practice, no source).
#include "daemon/name_index.h"

#include <gtest/gtest.h>

#include <algorithm>
#include <map>
#include <memory>
#include <random>
#include <string>
#include <vector>

namespace plumbline {
namespace {

struct Item {
  std::string name;
};

void ExpectSameAs(const NameIndex<Item>& index, const std::map<std::string, Item*>& reference,
                  const std::vector<std::unique_ptr<Item>>& all) {
  ASSERT_EQ(index.size(), reference.size());
  for (const auto& item : all) {
    const auto it = reference.find(item->name);
    EXPECT_EQ(index.Find(item->name), it == reference.end() ? nullptr : it->second)
        << item->name;
  }
}

TEST(NameIndexTest, FindsEveryNameThroughGrowthAndEraseInRandomOrder) {
  std::vector<std::unique_ptr<Item>> all;
  for (int i = 0; i < 3000; ++i) {
    all.push_back(std::make_unique<Item>(Item{"plant/line" + std::to_string(i % 7) + "/s" +
                                              std::to_string(i)}));
  }
  NameIndex<Item> index;
  std::map<std::string, Item*> reference;
  EXPECT_EQ(index.Find("plant/line0/s0"), nullptr);  // empty: no table yet
  for (const auto& item : all) {
    index.Insert(item.get());
    reference[item->name] = item.get();
  }
  ExpectSameAs(index, reference, all);

  std::mt19937 rng(7);
  std::vector<Item*> order;
  for (const auto& item : all) order.push_back(item.get());
  std::shuffle(order.begin(), order.end(), rng);
  for (std::size_t k = 0; k < order.size(); ++k) {
    EXPECT_TRUE(index.Erase(order[k]));
    EXPECT_FALSE(index.Erase(order[k]));  // not indexed any more
    reference.erase(order[k]->name);
    if (k % 250 == 0) ExpectSameAs(index, reference, all);
  }
  ExpectSameAs(index, reference, all);
  EXPECT_EQ(index.size(), 0u);
}

TEST(NameIndexTest, EraseKeepsLongProbeRunsReachable) {
  // A small table filled to its limit has long runs that wrap past the end; erasing
  // from their middles is where a wrong shift would strand an entry.
  std::vector<std::unique_ptr<Item>> all;
  for (int i = 0; i < 8; ++i) all.push_back(std::make_unique<Item>(Item{std::to_string(i)}));
  NameIndex<Item> index;
  std::map<std::string, Item*> reference;
  for (const auto& item : all) {
    index.Insert(item.get());
    reference[item->name] = item.get();
  }
  for (int round = 0; round < 50; ++round) {
    Item* item = all[static_cast<std::size_t>((round * 5) % 8)].get();
    if (reference.count(item->name)) {
      EXPECT_TRUE(index.Erase(item));
      reference.erase(item->name);
    } else {
      index.Insert(item);
      reference[item->name] = item;
    }
    ExpectSameAs(index, reference, all);
  }
}

TEST(NameIndexTest, NamesDifferingOnlyInTheirTailsAreDistinct) {
  Item a{"series"}, b{"series "}, c{"serie"};
  NameIndex<Item> index;
  index.Insert(&a);
  index.Insert(&b);
  EXPECT_EQ(index.Find("series"), &a);
  EXPECT_EQ(index.Find("series "), &b);
  EXPECT_EQ(index.Find("serie"), nullptr);
  EXPECT_FALSE(index.Erase(&c));
  index.Clear();
  EXPECT_EQ(index.Find("series"), nullptr);
  EXPECT_EQ(index.size(), 0u);
}

}  // namespace
}  // namespace plumbline
