"""Write the demo archive into ``records/``: finished, running and planned tests of an invented shop.

All of it is INVENTED DEMO DATA. "Brindlewick Home" (candles, linens and tableware, shipping in Europe), its
teams, the people named by initials, the tests, texts, links and every number are fictional, made up to show what
the archive does. No record describes a real company, person or experiment.

The results are simulated from known true effects, so that analyses of the archive can be checked against the
truth: every variant's true effect on conversion is a log risk ratio drawn as ``mean + tau * normal`` for the
test's first theme (``TRUE_EFFECTS``, also returned by :func:`true_effects`). Three tests are built on purpose
with a fixed effect instead of a draw: two whose effect differs by device (``DEVICE_EFFECTS``) and one whose arms
received different device mixes (``MIX_SHIFT``). Three tests carry a sample ratio mismatch whose lost visitors
bias the variant upwards (``SRM_SPLIT``). :func:`build_archive` returns every test with its true effects.

The numbers come from a numpy Generator seeded with ``SEED`` (texts use a second, separate stream), so running

    python scripts/make_demo.py

twice gives byte-identical files. The script deletes and rewrites only files it wrote itself: records that begin
with ``HEADER`` and the orders files those records name.
"""

from __future__ import annotations

import datetime as dt
import math
from collections import Counter
from dataclasses import dataclass, field
from pathlib import Path
from statistics import NormalDist
from typing import Any

import numpy as np
import yaml

SEED = 20261202
RECORDS = Path(__file__).resolve().parent.parent / "records"
HEADER = "# Invented demo data for the fictional shop Brindlewick Home, written by scripts/make_demo.py.\n"

#: theme -> (mean true log risk ratio of conversion, spread tau between tests), both on the log scale
TRUE_EFFECTS: dict[str, tuple[float, float]] = {
    "social-proof": (0.020, 0.025),
    "urgency": (-0.010, 0.030),
    "shipping-cost": (0.035, 0.030),
    "trust-signals": (0.010, 0.020),
    "product-imagery": (0.015, 0.025),
    "navigation": (0.000, 0.020),
    "checkout-friction": (0.030, 0.025),
    "pricing-display": (0.005, 0.025),
    "personalisation": (0.015, 0.030),
    "copywriting": (0.000, 0.015),
}

#: tests (by idea slug) whose variant's true log risk ratio is set per device instead of drawn
DEVICE_EFFECTS: dict[str, dict[str, float]] = {
    "larger-gallery": {"desktop": math.log(1.07), "mobile": math.log(0.94), "tablet": math.log(1.02)},
    "express-pay-basket": {"desktop": math.log(0.99), "mobile": math.log(1.09), "tablet": math.log(1.02)},
}

#: a test whose variant truly helps on every device but received far more mobile traffic than control
MIX_SHIFT: dict[str, dict[str, Any]] = {
    "mega-menu-by-room": {"effect": math.log(1.05), "mobile_share": {"control": 0.52, "rooms-menu": 0.78}},
}

#: control / variant shares actually assigned in the three tests with a redirect bug (planned 50/50)
SRM_SPLIT = (0.515, 0.485)

BASELINE = {  # conversion of a visitor to the page area
    "home": 0.018,
    "search": 0.032,
    "category-page": 0.026,
    "product-page": 0.038,
    "basket": 0.052,
    "checkout": 0.058,
}
DAILY_VISITORS = {
    "home": 9000,
    "search": 3500,
    "category-page": 7000,
    "product-page": 9000,
    "basket": 3000,
    "checkout": 2200,
}
#: device -> (share of visitors, conversion factor, order value factor)
DEVICES = {"desktop": (0.34, 1.35, 1.08), "mobile": (0.59, 0.82, 0.95), "tablet": (0.07, 1.05, 1.00)}
#: traffic source -> (share of visitors, conversion factor)
SOURCES = {
    "organic": (0.36, 1.00),
    "paid-search": (0.25, 0.85),
    "email": (0.12, 1.70),
    "social": (0.09, 0.50),
    "direct": (0.18, 1.25),
}
ORDER_VALUE_SIGMA = 0.62  # of the log order value
REPEAT_ORDER_P = 0.93  # orders per converting visitor ~ geometric(p): 7% order more than once
FIRST_DAY, LAST_DAY = dt.date(2023, 1, 9), dt.date(2025, 10, 13)  # range of start dates of first rounds

OWNERS = {
    "home": ["growth team", "Ines K."],
    "search": ["discovery team", "Lotte B."],
    "category-page": ["discovery team", "Maren O."],
    "product-page": ["product-page squad", "Tomasz W.", "Joost V."],
    "basket": ["checkout squad", "Aurélie D."],
    "checkout": ["checkout squad", "Piotr S."],
}

# --- what was tested ------------------------------------------------------------------------------------
# at: [theme, page area, slug]; saw/change fill the hypothesis; now describes control; arms the variants.
# Optional: also (more themes), special, followup, start (pinned), n (target visitors per arm), aov (log
# shift of order value per arm), extremes (large orders in EUR per arm), device_note, status.

IDEAS_YAML = r"""
- at: [social-proof, product-page, review-stars-up-top]
  title: Review stars next to the product name
  saw: in scroll maps that two thirds of product-page visitors never reach the reviews block
  change: showing the star rating and review count right under the product name
  now: Stars and reviews only in the reviews block below the description.
  arms: {stars-top: "Average review stars and count under the product name; a click jumps to the reviews."}
  insight: Review stars only show from 5 reviews up; about a third of the candle range has fewer, so those pages
    looked the same in both arms.
  tags: [reviews]
- at: [social-proof, category-page, review-stars-on-tiles]
  title: Star ratings on category tiles
  saw: in session recordings that shoppers open three or four products just to compare their ratings
  change: adding the average review stars to every category tile
  now: Tiles show image, name and price only.
  arms: {stars-on-tiles: "Average review stars and review count under each tile's price."}
  insight: Tiles with review stars got more clicks on well-reviewed table linen, but shoppers opened fewer
    products per visit.
  tags: [reviews, category-tiles]
  followup:
    kind: refine
    slug: review-stars-on-tiles-round-2
    title: "Star ratings on category tiles, round 2: only from 10 reviews"
    change: showing review stars on tiles only from 10 reviews and writing out the count
    arm: "Review stars on tiles only for products with at least 10 reviews; count written as '48 reviews'."
- at: [social-proof, product-page, bought-recently-badge]
  title: Purchase-count badge on product pages
  saw: that best-sellers convert far better than the rest of the range once visitors find them
  change: a badge saying how often the item was bought recently
  now: No purchase counts shown.
  arms:
    badge-today: "Badge 'Bought 14 times today' above the add-to-basket button, shown from 5 purchases."
    badge-week: "Badge 'Bought 60 times this week' in the same place."
  insight: The purchase-count badge showed on only about a fifth of product pages (items with at least 5 sales in
    the window).
  tags: [badges, best-sellers]
  followup:
    kind: reduce
    slug: bought-recently-badge-round-2
    title: Purchase-count badge, round 2 with the better wording
    change: the better-performing purchase-count badge alone
- at: [social-proof, home, customer-photos-home]
  title: Customer table photos on the home page
  saw: that product pages with customer photos keep visitors longer than those without
  change: a strip of customer photos of laid tables, each linking to the products in it
  now: Editorial hero and category tiles only.
  arms: {photo-strip: "Strip of eight customer photos under the hero; tapping one lists the products used."}
  insight: Only 3% of home-page visitors tapped a customer photo; on mobile most of the strip sat below the fold.
  tags: [ugc, customer-photos]
- at: [social-proof, basket, basket-review-snippet]
  title: One-line review under each basket item
  saw: exit-survey answers doubting the quality of the products at the very last step
  change: a short top review under every item in the basket
  now: Basket lists items, quantities and prices.
  arms: {review-line: "Best-rated short review (at most 90 characters) under each item, with its stars."}
  insight: Snippets were cut at 90 characters, and for scented candles the top review often praised the delivery
    rather than the scent.
  tags: [reviews]
  special: orders
  n: [6000, 12000]
- at: [social-proof, product-page, helpful-reviews-first]
  title: Most helpful reviews first
  saw: that the newest reviews, shown first, are often one-word ratings
  change: sorting reviews by helpful votes with photo reviews pinned on top
  now: Reviews sorted newest first.
  arms: {helpful-first: "Reviews sorted by helpful votes; reviews with photos pinned first."}
  insight: Only 11% of visitors opened the reviews tab, which caps what any change inside it can do to conversion.
  tags: [reviews]
- at: [social-proof, search, search-bestseller-label]
  title: Best-seller label in search results
  saw: that visitors with vague queries such as 'white candles' scroll through 40 or more results
  change: labelling the top-selling results with a best-seller tag
  now: Search results without labels.
  arms: {bestseller-tag: "A 'Best-seller' tag on the top 10% of products by sales in their category."}
  insight: The best-seller label appeared on at most two results per query; searches for tableware sets rarely
    had one.
  tags: [best-sellers, badges]
- at: [urgency, product-page, low-stock-message]
  title: Low-stock message on product pages
  saw: that visitors who put an item on their wish list often come back after it has sold out
  change: showing 'Only 3 left' when fewer than five are in stock
  now: "Stock level hidden; 'In stock' shown."
  arms: {low-stock: "Amber 'Only N left' under the price when fewer than 5 are in stock."}
  insight: The low-stock message showed on only 8% of product views, mostly seasonal candles.
  tags: [stock, scarcity]
  special: srm-ship
  start: 2024-03-04
  n: [95000, 105000]
- at: [urgency, product-page, dispatch-countdown]
  title: Countdown to the same-day dispatch cut-off
  saw: many chat questions asking whether an order placed now still leaves the warehouse today
  change: a countdown timer 'Order within 2 h 14 min for dispatch today'
  now: "Static text: orders before 14:00 ship the same day."
  arms: {countdown: "Live countdown timer to the 14:00 dispatch cut-off, shown on weekdays."}
  insight: The countdown timer was only visible on weekdays before 14:00, so about 40% of the traffic saw the same
    page in both arms.
  tags: [countdown-timer, delivery-speed]
- at: [urgency, home, sale-countdown-banner]
  title: Countdown timer in the winter sale banner
  saw: that sale traffic peaks in the last two days of the sale
  change: a countdown timer in the sale banner
  now: Sale banner with the discount only.
  arms:
    banner-timer: Sale banner with a live countdown timer to the end of the sale.
    banner-ends-sunday: "Same banner with the words 'Ends Sunday' instead of a timer."
  insight: Half of the sale revenue came in the last two days of the winter sale, in all arms alike.
  tags: [countdown-timer, sale]
  start: 2025-01-06
- at: [urgency, basket, basket-hold-timer]
  title: Basket reservation timer
  saw: that limited-edition candles sell out while sitting in other shoppers' baskets
  change: reserving basket items for 15 minutes with a visible timer
  now: No reservation; stock is checked at payment.
  arms: {reservation-timer: "Banner 'Your items are reserved for 14:59' counting down in the basket."}
  insight: Several customer-service emails called the basket timer pushy; the complaints came from regular
    customers.
  tags: [countdown-timer, scarcity]
- at: [urgency, category-page, selling-fast-tiles]
  title: Selling-fast label on category tiles
  saw: that items whose sales double in a week are hard to spot in long categories
  change: a 'Selling fast' label on tiles of items whose sales doubled this week
  now: No labels on tiles.
  arms: {selling-fast: "A 'Selling fast' label in the corner of qualifying tiles."}
  insight: The selling-fast label was on 6% of tiles and the same few products carried it for weeks, so returning
    visitors stopped noticing it.
  tags: [badges, category-tiles]
- at: [urgency, product-page, christmas-deadline]
  title: Christmas delivery deadline on product pages
  saw: a spike of 'will it arrive before Christmas' chats every December
  change: a line with the last order date for delivery before Christmas to the visitor's country
  now: Christmas deadlines listed only on the delivery page.
  arms: {deadline-note: "Line under the price reading 'Order by 18 December for Christmas' (date per country)."}
  insight: Per-country cut-offs mattered; the Christmas deadline for Italy and Spain (15 December) came earlier
    than most shoppers expected.
  tags: [christmas, delivery-speed]
  start: 2024-11-18
- at: [shipping-cost, basket, free-delivery-threshold]
  title: "Free delivery threshold: 60 against 50 and 45 EUR"
  saw: that a third of baskets sit between 40 and 60 EUR and pay 4.95 EUR for delivery
  change: lowering the free delivery threshold
  now: Free delivery from 60 EUR, otherwise 4.95 EUR.
  arms:
    threshold-50: Free delivery from 50 EUR, announced in the basket and the site header.
    threshold-45: Free delivery from 45 EUR, same messages.
  insight: A lower free delivery threshold pulled the average order value down as baskets stopped at the new
    threshold; margin after delivery cost is the number to watch.
  tags: [free-delivery, delivery-cost]
  aov: {threshold-50: -0.05, threshold-45: -0.18}
  followup:
    kind: reduce
    slug: free-delivery-threshold-confirmation
    title: "Free delivery threshold: confirmation round against 60 EUR"
    change: the better of the lower free delivery thresholds alone
- at: [shipping-cost, basket, delivery-progress-bar]
  title: Progress bar towards free delivery
  saw: baskets just under the free delivery threshold being abandoned at the delivery-cost line
  change: a progress bar 'You are 8.50 EUR away from free delivery' in the basket
  now: Delivery cost line in the basket summary.
  arms: {progress-bar: "Progress bar towards the free delivery threshold above the basket summary."}
  insight: About a quarter of baskets were within 15 EUR of the free delivery threshold; tealights and napkin rings
    were the add-ons people picked.
  tags: [free-delivery, basket-size]
  aov: {progress-bar: 0.03}
  followup:
    kind: refine
    slug: delivery-progress-bar-with-add-ons
    title: Progress bar towards free delivery with add-on suggestions
    change: "the progress bar with three small add-ons priced to close the gap"
    arm: "Progress bar plus three add-ons priced to close the gap (tealights, napkin rings, matches)."
- at: [shipping-cost, product-page, delivery-cost-on-pdp]
  title: Delivery cost on the product page
  saw: that the delivery cost is the top reason given in basket exit surveys
  change: stating the delivery cost and the free delivery threshold under the price
  now: Delivery cost first shown in the basket.
  arms: {delivery-line: "Line under the price reading 'Delivery 4.95 EUR, free from 60 EUR'."}
  insight: Showing the delivery cost early moved part of the drop-off from the basket to the product page.
  tags: [delivery-cost, free-delivery]
  special: srm-rerun
  start: 2024-03-18
  n: [95000, 105000]
  followup:
    kind: rerun
    slug: delivery-cost-on-pdp-rerun
    title: Delivery cost on the product page, rerun with server-side assignment
    change: stating the delivery cost and the free delivery threshold under the price
- at: [shipping-cost, checkout, pickup-point-option]
  title: Pick-up point delivery for 2.95 EUR
  saw: that 18% of Dutch and Belgian customers ask for delivery to a pick-up point
  change: offering pick-up point delivery at 2.95 EUR next to home delivery
  now: Home delivery only, 4.95 EUR.
  arms: {pickup-point: "Pick-up point delivery (2.95 EUR) as a second option with a map of nearby points."}
  insight: Pick-up point delivery was chosen for 22% of orders in the variant, mostly in the Netherlands and
    Belgium; it was not offered in Portugal.
  tags: [delivery-options, delivery-cost]
- at: [shipping-cost, home, free-delivery-header]
  title: Free delivery message in the site header
  saw: that first-time visitors do not know about free delivery from 60 EUR
  change: a slim header bar 'Free delivery from 60 EUR, 30-day returns'
  now: No header bar.
  arms: {header-bar: "Slim bar above the logo with the free delivery threshold and the returns period."}
  insight: The header bar pushed the hero down by 36 px on mobile, so the first product row moved below the fold.
  tags: [free-delivery, header]
- at: [shipping-cost, checkout, cheapest-delivery-preselected]
  title: Standard delivery preselected in checkout
  saw: that customers who picked express delivery by mistake contact support to change it
  change: preselecting standard delivery instead of the last used option
  now: The delivery option used last time is preselected.
  arms: {standard-first: "Standard delivery always preselected; express delivery one tap away."}
  insight: Express delivery fell from 17% to 11% of orders, which costs delivery revenue but not conversion.
  tags: [delivery-options]
- at: [shipping-cost, category-page, free-returns-badge]
  title: Free returns badge on linen categories
  saw: that bed-linen buyers worry about size and colour before their first order
  change: a 'Free returns within 30 days' badge on the bed-linen and table-linen category pages
  now: Returns policy only in the footer.
  arms: {returns-badge: "Badge under the category title with a link to the returns policy."}
  insight: The free returns badge was shown only on linen categories; return rates in the following month did not
    change.
  tags: [returns, linen]
  also: [trust-signals]
- at: [trust-signals, checkout, payment-logos]
  title: Payment method logos above the pay button
  saw: that 9% of checkout exits happen on the payment step
  change: showing the accepted payment methods as logos above the pay button
  now: Payment methods in a dropdown only.
  arms: {logos: "Row of payment logos (cards, bank transfer, pay later) above the pay button."}
  insight: Most visitors who left at payment had already opened the payment dropdown; the logos repeated what they
    had seen.
  tags: [payment]
- at: [trust-signals, product-page, returns-line-pdp]
  title: 30-day returns line under the price
  saw: returns questions in the chat from visitors who have not ordered yet
  change: a 'Free returns within 30 days' line under the price
  now: Returns policy only in the footer and the FAQ.
  arms: {returns-line: "The line 'Free returns within 30 days' under the price, with a link to the policy."}
  insight: The returns line sat right below the delivery estimate; heat maps show few taps on the policy link.
  tags: [returns]
  special: srm-discard
  start: 2024-04-08
  n: [95000, 105000]
- at: [trust-signals, category-page, organic-cotton-badge]
  title: Organic-cotton certificate badge on linen
  saw: that 'is it organic' is the most asked question about bed linen
  change: a certificate badge on tiles of linen made from certified organic cotton
  now: Certificate mentioned only in the product details.
  arms: {certificate-badge: "Small organic-cotton certificate badge on qualifying tiles."}
  insight: Only 40% of the linen range is certified, so the organic-cotton badge also made the other items look
    worse by contrast.
  tags: [sustainability, linen, badges]
- at: [trust-signals, checkout, secure-checkout-header]
  title: Reassurance header in checkout
  saw: visitors leaving checkout through the main navigation
  change: a checkout header 'Secure checkout, free returns, help 8-18 h' instead of the full navigation
  now: Full shop navigation on checkout pages.
  arms: {reassurance-header: "Slim header with the three promises and a phone number; no shop navigation."}
  insight: Without the full navigation in checkout, fewer visitors went back to browsing from the address step.
  tags: [header, checkout-navigation]
  also: [checkout-friction]
- at: [trust-signals, basket, burn-time-guarantee]
  title: Burn-time guarantee for candles in the basket
  saw: reviews complaining that cheap candles tunnel and burn out early
  change: a guarantee box 'At least 40 hours burn time or your money back' for baskets with candles
  now: No guarantee mentioned.
  arms: {guarantee-box: "Guarantee box with the burn time above the basket summary."}
  insight: The burn-time guarantee only showed for baskets with pillar candles; tealight-only baskets were left out.
  tags: [candles, guarantee]
- at: [trust-signals, product-page, workshop-story]
  title: Maker's story on tableware pages
  saw: that tableware visitors compare our plates with cheaper lookalikes
  change: a short block about the workshop that glazes the plates, with a photo
  now: Material and dimensions only.
  arms: {workshop-block: "Photo of the glazing workshop and three sentences on how the plates are made."}
  insight: The workshop block was seen by 55% of tableware visitors; the stoneware plates gained the most views.
  tags: [tableware, storytelling]
  also: [copywriting]
- at: [product-imagery, product-page, lifestyle-first-image]
  title: Lifestyle photo as the first gallery image
  saw: that visitors swipe straight to the lifestyle photos in the gallery
  change: putting a lifestyle photo first in the product gallery
  now: Packshot on white first, lifestyle photos from the third image on.
  arms:
    lifestyle-first: First gallery image is a laid table showing the product in use.
    lifestyle-and-scale: Lifestyle image first, then an image with a hand for scale.
  insight: Lifestyle photos exist for only 70% of the range; the rest kept the packshot first in every arm.
  tags: [gallery, photography]
  followup:
    kind: reduce
    slug: lifestyle-first-image-round-2
    title: "Lifestyle photo first: the better gallery order alone"
    change: the better-performing gallery order alone
- at: [product-imagery, category-page, hover-second-image]
  title: Second image on hover on category tiles
  saw: that visitors open products just to see them in a room setting
  change: showing a lifestyle image when the pointer rests on a tile
  now: One packshot per tile.
  arms: {hover-image: "Hovering (or a long press on touch screens) shows a lifestyle image."}
  insight: On touch screens very few visitors discovered the long press; whatever effect there was came from
    desktop.
  tags: [category-tiles, photography]
- at: [product-imagery, product-page, linen-texture-zoom]
  title: Full-screen zoom for linen texture
  saw: questions about the weave and feel of washed linen in the chat
  change: a full-screen zoom that shows the weave of the fabric
  now: Gallery images up to 800 px, no zoom.
  arms: {texture-zoom: "Tap or click opens a full-screen zoom of a 3000 px image."}
  insight: Visitors zoomed mostly on washed linen and waffle towels; the zoom loaded a 2 MB image, slow on mobile.
  tags: [gallery, linen]
- at: [product-imagery, product-page, candle-burn-video]
  title: Short burn video for candles
  saw: that candle buyers ask how the flame and the glass look when lit
  change: an eight-second loop of the candle burning in the gallery
  now: Still images only.
  arms: {burn-video: "Eight-second silent loop of the lit candle as the second gallery item."}
  insight: The burn video played muted; about half of the candle-page visitors reached it in the gallery.
  tags: [video, candles]
- at: [product-imagery, product-page, larger-gallery]
  title: Larger image gallery on product pages
  saw: that visitors on large screens zoom into almost every product image
  change: a gallery twice as large
  now: Gallery takes a third of the width on desktop and half the screen height on mobile.
  arms: {big-gallery: "Gallery takes two thirds of the width on desktop and the full screen height on mobile."}
  insight: Image views per visit rose in the variant on every device.
  tags: [gallery, mobile]
  special: device-split
  n: [105000, 115000]
  device_note: on phones the big gallery pushes the add-to-basket button below the fold
- at: [product-imagery, category-page, scale-reference-tiles]
  title: Scale reference images in the candle category
  saw: many 'how big is it' questions about pillar candles
  change: tile images that show the candle next to a hand
  now: Packshots without a size reference.
  arms: {hand-for-scale: "Second tile image with a hand beside the candle."}
  insight: Size questions about candles to customer service fell from about 30 to 12 a week during the test.
  tags: [candles, photography]
- at: [product-imagery, home, seasonal-hero]
  title: Seasonal mood photo instead of a product grid on the home page
  saw: that the brand team's autumn table photo got the most likes on social media
  change: a full-width seasonal mood photo with one 'Shop the look' button
  now: Hero with a grid of six best-sellers.
  arms: {mood-hero: "Full-width autumn table photo with one 'Shop the look' button."}
  insight: The mood hero won the design review and a five-person hallway test; the product grid gave more clicks
    to product pages.
  tags: [hero, brand]
  special: liked
- at: [navigation, home, mega-menu-by-room]
  title: Menu organised by room
  saw: in search logs that visitors look for 'dining', 'bedroom' and 'guest room' rather than product types
  change: organising the main menu by room
  now: Menu by product type (candles, linens, tableware).
  arms: {rooms-menu: "Main menu by room (dining, bedroom, living, outdoor) with product types inside."}
  insight: The rooms menu was opened as often as the old one; 'dining' took 48% of menu clicks.
  tags: [menu, information-architecture]
  special: simpson
  n: [80000, 90000]
  followup:
    kind: rerun
    slug: menu-by-room-rerun
    title: Menu organised by room, rerun with the app routing fixed
    change: organising the main menu by room
- at: [navigation, category-page, sticky-filters]
  title: Sticky filter bar on category pages
  saw: that visitors scroll back to the top of long categories to change a filter
  change: a filter bar that stays at the top of the screen while scrolling
  now: Filters at the top of the list only.
  arms: {sticky-bar: "Filter bar sticks to the top of the screen (56 px high)."}
  insight: The sticky filter bar took 56 px of screen height; filter use rose but scroll depth fell.
  tags: [filters, mobile]
  special: segment-ship
- at: [navigation, search, search-suggestion-images]
  title: Product images in search suggestions
  saw: that a quarter of searchers retype their query after seeing the suggestions
  change: showing a thumbnail and price next to each suggested product
  now: Text-only search suggestions.
  arms: {image-suggestions: "Up to four suggested products with thumbnail and price under the query suggestions."}
  insight: Suggestions were used for 31% of searches, up from 24%; 'napkins' and 'pillar candles' were the top
    queries.
  tags: [search-suggestions]
- at: [navigation, category-page, colour-filter-linens]
  title: Colour swatch filter for linens
  saw: that 'sage' and 'oat' are among the most searched words on linen pages
  change: a colour swatch filter on linen categories
  now: Filters for size and material only.
  arms: {colour-swatches: "Row of colour swatches above the linen product list."}
  insight: Sage and oat were the most filtered colours; 12 products lacked a colour tag and vanished whenever a
    colour filter was used.
  tags: [filters, linen]
- at: [navigation, home, shop-by-occasion]
  title: Shop-by-occasion tiles on the home page
  saw: gift searches for weddings and housewarmings landing on the home page
  change: four occasion tiles under the hero
  now: Category tiles by product type.
  arms: {occasion-tiles: "Tiles for wedding, housewarming, dinner party and Christmas under the hero."}
  insight: The wedding tile got the most clicks in spring and led mostly to table linen sets; the Christmas tile
    linked to an empty page until October.
  tags: [gifting, occasions]
- at: [navigation, search, zero-results-help]
  title: Helpful page for searches without results
  saw: that 4% of searches return nothing and 80% of those visitors leave
  change: a zero-results page with spelling suggestions and popular categories
  now: "Plain message: no results found."
  arms: {helpful-zero: "Spelling suggestion, the six most popular categories and best-sellers."}
  insight: Most empty searches were misspellings such as 'candel' or Dutch and German words like 'kaars' and
    'Tischdecke'.
  tags: [search, zero-results]
- at: [checkout-friction, checkout, guest-checkout-first]
  title: Guest checkout as the first option
  saw: that 35% of visitors who reach the log-in step of checkout leave there
  change: making guest checkout the main option
  now: Log-in form first, guest checkout as a link below it.
  arms: {guest-first: "Main button 'Continue as guest'; log-in as a secondary link."}
  insight: Accounts created at checkout fell by about a third, which the email team will feel in its reach.
  tags: [guest-checkout, accounts]
  followup:
    kind: refine
    slug: guest-checkout-with-account-offer
    title: Guest checkout first, with an account offer after payment
    change: "guest checkout first plus a one-click offer to save the details after payment"
    arm: "Guest checkout first; a one-click 'save my details' offer on the order confirmation page."
- at: [checkout-friction, checkout, address-autocomplete]
  title: Address autocomplete in checkout
  saw: typos in street names causing 2% of parcels to be returned to sender
  change: an address lookup from postcode and house number
  now: Manual address form.
  arms: {autocomplete: "Address lookup from postcode and house number, manual entry as a fallback."}
  insight: The address lookup service covered the Netherlands, Belgium and Germany only.
  tags: [address-form, forms]
  special: stopped-bug
- at: [checkout-friction, checkout, one-page-checkout]
  title: One-page checkout against three steps
  saw: that every checkout step loses 6-9% of the visitors who reach it
  change: fewer checkout steps
  now: "Three steps: address, delivery, payment."
  arms:
    one-page: Address, delivery and payment on one page.
    two-step: Address and delivery together, payment on a second page.
  insight: On the one-page checkout, payment errors appeared far below the pay button on mobile.
  tags: [checkout-steps, forms]
- at: [checkout-friction, basket, express-pay-basket]
  title: Express payment buttons in the basket
  saw: that mobile shoppers abandon checkout at the card number field
  change: wallet payment buttons at the top of the basket
  now: One 'Go to checkout' button.
  arms: {express-buttons: "Wallet payment buttons at the top of the basket, above 'Go to checkout'."}
  insight: A fifth of the variant's orders used a wallet button and skipped the address form.
  tags: [payment, mobile]
  special: device-split
  n: [100000, 115000]
  device_note: wallet buttons matter where typing a card number is painful
- at: [checkout-friction, checkout, phone-optional]
  title: Phone number optional in checkout
  saw: complaints in exit surveys that we ask for a phone number
  change: making the phone number optional
  now: Phone number required.
  arms: {phone-optional: "Phone number optional, with the hint 'only for delivery questions'."}
  insight: About 60% of guests left the phone field empty once it was optional; couriers asked for a number on 2%
    of deliveries.
  tags: [forms]
- at: [checkout-friction, checkout, gift-wrap-checkbox]
  title: Gift wrap as a checkbox instead of its own step
  saw: that the separate gift-wrap step loses 3% of the visitors who reach it
  change: offering gift wrap as a checkbox on the delivery step
  now: Separate gift-wrap step between delivery and payment.
  arms: {gift-wrap-checkbox: "Gift wrap (3.50 EUR) and gift message as a checkbox on the delivery step."}
  insight: Gift wrap was added to 9% of orders in the variant against 7% in control.
  tags: [gift-wrap, checkout-steps]
  special: orders
  n: [9000, 13000]
  extremes: {gift-wrap-checkbox: [4000.0, 1860.0]}
- at: [checkout-friction, checkout, voucher-field-collapsed]
  title: Collapsed voucher code field
  saw: visitors leaving checkout to search the web for voucher codes
  change: collapsing the voucher field behind a small link
  now: Open voucher code field above the pay button.
  arms: {voucher-link: "Link 'Have a voucher code?' that opens the field."}
  insight: With the voucher field behind a link, voucher use among orders fell only slightly, from 14% to 12%.
  tags: [vouchers, forms]
- at: [pricing-display, product-page, price-per-piece]
  title: Price per piece for tableware sets
  saw: that shoppers compare our sets with single plates sold elsewhere
  change: showing the price per piece next to the set price
  now: Set price only.
  arms: {per-piece: "Set price with '4 plates, 12.25 EUR each' below it."}
  insight: The per-piece price was shown on 140 tableware sets and made them easier to compare with single plates.
  tags: [tableware, price-labels]
- at: [pricing-display, category-page, sale-strike-through]
  title: Strike-through prices in the sale
  saw: that sale visitors cannot tell how much an item is reduced
  change: showing the old price struck through next to the sale price
  now: Sale price with a red 'Sale' label.
  arms: {strike-through: "Old price struck through and the saving in percent next to the sale price."}
  insight: The strike-through price showed only on sale items, 15% of the range during the test.
  tags: [sale, price-labels]
- at: [pricing-display, product-page, napkin-bundle-price]
  title: Bundle prices for napkins
  saw: that 60% of napkin orders are for four or more single napkins
  change: offering sets of napkins at a bundle price
  now: Single napkins only.
  arms:
    bundle-4: Set of 4 napkins at 10% off, next to the single napkin.
    bundle-6: Set of 6 napkins at 15% off.
  insight: Bundle prices shifted units towards sets; napkins per order rose.
  tags: [bundles, linen]
- at: [pricing-display, basket, savings-summary]
  title: You-save line in the basket
  saw: that visitors in the sale re-check each product page before paying
  change: a 'You save 12.40 EUR' line in the basket summary
  now: Basket summary with subtotal and delivery only.
  arms: {you-save: "Green line with the total saving on sale items above the subtotal."}
  insight: Only 35% of baskets held a discounted item, so most visitors never saw a You-save line.
  tags: [sale, basket-summary]
  special: orders
  n: [7000, 12000]
- at: [pricing-display, product-page, instalments-note]
  title: Pay-in-3 instalments note under the price
  saw: that baskets above 100 EUR are abandoned more often at payment
  change: a note that orders over 75 EUR can be paid in three instalments
  now: Instalments mentioned only at payment.
  arms: {instalments-note: "Note 'Pay in 3 interest-free instalments from 75 EUR' under the price."}
  insight: The pay-later note applied only from 75 EUR, which few single candles reach.
  tags: [payment, pay-later]
  special: stopped-peek
- at: [pricing-display, category-page, price-endings]
  title: Price endings on category pages
  saw: that our prices end in .90 while the brand is meant to feel calm, not discount
  change: changing how prices end
  now: Prices end in .90 (24.90 EUR).
  arms:
    ends-95: Prices end in .95 (24.95 EUR).
    whole-euros: Whole euros (25 EUR).
  insight: Whole-euro prices looked calmer on tableware pages; the difference per item was at most 0.10 EUR.
  tags: [price-labels]
- at: [personalisation, home, recently-viewed-home]
  title: Recently viewed products on the home page
  saw: that a third of returning visitors search again for a product they viewed before
  change: a row of recently viewed products on the home page
  now: Same home page for everyone.
  arms: {recently-viewed: "Row of up to eight recently viewed products under the hero."}
  insight: Returning visitors were 38% of home-page traffic, and only they saw the recently viewed row.
  tags: [recommendations, returning-visitors]
- at: [personalisation, product-page, complete-the-table]
  title: Complete-the-table recommendations
  saw: that orders with tableware often also contain napkins and candles
  change: a 'Complete the table' row with matching items on product pages
  now: "A 'You may also like' row with similar items."
  arms: {complete-the-table: "Row of matching items from other categories (napkins, candle holders, runners)."}
  insight: The recommendations had no stock data and suggested sold-out items 6% of the time.
  tags: [recommendations, cross-sell]
- at: [personalisation, basket, basket-cross-sell]
  title: Matching candles in the basket
  saw: that candle holders are often bought without candles that fit them
  change: suggesting candles that fit the holders in the basket
  now: No suggestions in the basket.
  arms: {fitting-candles: "Up to three candles that fit the holders in the basket, addable with one tap."}
  insight: The fitting-candles row appeared in 12% of baskets, those with a candle holder.
  tags: [cross-sell, candles]
  aov: {fitting-candles: 0.02}
- at: [personalisation, home, returning-visitor-hero]
  title: Home hero based on the last category viewed
  saw: that returning visitors go straight back to the category they browsed before
  change: a home hero that shows the category viewed last
  now: Same seasonal hero for everyone.
  arms: {last-category-hero: "Hero image and button for the category viewed on the last visit."}
  insight: The hero changed for 41% of visitors; those with a single earlier visit often got a category they had
    opened by accident.
  tags: [returning-visitors, hero]
- at: [personalisation, search, personalised-ranking]
  title: Search ranking boosted by browsing history
  saw: that visitors who browsed linen and then search 'grey' get grey candles first
  change: boosting search results from categories the visitor browsed
  now: Same ranking for everyone.
  arms: {history-boost: "Results from the visitor's browsed categories of the last 30 days ranked higher."}
  insight: Visitors without browsing history (57%) saw the standard ranking in both arms.
  tags: [search-ranking]
  also: [navigation]
- at: [personalisation, category-page, linen-size-memory]
  title: Remembered bed-linen size
  saw: that bed-linen buyers set the same size filter on every visit
  change: remembering the last chosen bed-linen size
  now: Size filter empty on every visit.
  arms: {remember-size: "Size filter preset to the last size chosen, with a visible 'clear' option."}
  insight: The size filter was remembered for two in three returning linen visitors; 135x200 and 155x220 were the
    most common sizes.
  tags: [filters, linen]
- at: [copywriting, product-page, scent-notes]
  title: Scent descriptions as top, heart and base notes
  saw: that candle reviews describe scents in words our product texts never use
  change: describing each scent as top, heart and base notes
  now: One paragraph of mood text per candle.
  arms: {scent-notes: "Three lines for top, heart and base notes, e.g. 'fig leaf / cedar / amber'."}
  insight: Scent notes helped most for the darker winter candles; the fresh summer scents were bought on the name
    alone.
  tags: [candles, product-text]
- at: [copywriting, basket, checkout-button-wording]
  title: Wording of the basket's checkout button
  saw: that 8% of basket visitors hover over the checkout button without clicking
  change: a different text on the checkout button
  now: "Button text 'Go to checkout'."
  arms:
    checkout-securely: "Button text 'Checkout securely' with a lock icon."
    continue-to-delivery: "Button text 'Continue to delivery'."
    order-now: "Button text 'Order now'."
  insight: The wording of the checkout button changed clicks on it more than it changed orders.
  tags: [button-copy]
  followup:
    kind: reduce
    slug: checkout-button-wording-round-2
    title: "Checkout button wording: the best text alone"
    change: the best checkout button text from the first round alone
- at: [copywriting, home, value-proposition]
  title: Value proposition under the logo
  saw: in five-second tests that new visitors could not say what the shop sells
  change: a one-line value proposition under the logo
  now: Logo only.
  arms:
    small-workshops: "Line 'Candles, linens and tableware from small European workshops'."
    slow-living: "Line 'Slow living for your table'."
    delivery-promise: "Line 'Free delivery from 60 EUR, 30-day returns'."
    hand-poured: "Line 'Hand-poured candles and hand-finished linen'."
  insight: Brand recall in the follow-up survey was best for the small-workshops line.
  tags: [brand, headline]
  special: best-of-many
  n: [35000, 45000]
- at: [copywriting, product-page, care-instructions]
  title: Linen care instructions up front
  saw: questions like 'can I tumble-dry it?' in the chat before first orders
  change: three care icons with short instructions next to the price
  now: Care instructions in a tab at the bottom of the page.
  arms: {care-icons: "Three care icons (wash, dry, iron) with a line each, next to the price."}
  insight: Care questions were answered on the first screen; returns for shrinkage could not be measured within
    the test window.
  tags: [linen, product-text]
  special: orders
  n: [8000, 13000]
  extremes: {control: [2640.0]}
- at: [copywriting, category-page, category-intros]
  title: Short intros on category pages
  saw: that category pages have no text and search visitors bounce from them
  change: a two-sentence intro at the top of each category
  now: Category title and products only.
  arms: {intro-text: "Two sentences on what the category holds and how to choose, above the products."}
  insight: The category intros pushed the first product row down by one line on mobile.
  tags: [category-text]
- at: [copywriting, checkout, delivery-date-copy]
  title: Delivery date instead of delivery time in checkout
  saw: "'when will it arrive' chats from customers who chose '2-4 working days'"
  change: stating the expected delivery date instead of a range of working days
  now: "The text '2-4 working days' next to each delivery option."
  arms: {date-copy: "The text 'Arrives Thursday 14 March' next to each delivery option."}
  insight: The delivery dates were correct for 93% of parcels, measured against courier scans.
  tags: [delivery-speed]
- at: [personalisation, checkout, gift-message-card]
  title: Printed gift message card offer
  saw: that one order in ten has a gift message typed into the delivery notes
  change: offering a free printed gift message card
  now: Delivery notes field only.
  arms: {gift-card: "Free printed card with the customer's message, chosen on the delivery step."}
  insight: ""
  tags: [gifting, gift-wrap]
  status: planned
- at: [navigation, home, scent-finder-quiz]
  title: Scent finder quiz on the home page
  saw: that 'which scent' is the most common question about candles in the chat
  change: a three-question scent finder quiz
  now: No quiz.
  arms:
    quiz-hero: Quiz in the home hero.
    quiz-tile: Quiz as a tile in the category row.
  insight: ""
  tags: [quiz, candles]
  status: planned
- at: [checkout-friction, checkout, delivery-date-picker]
  title: Delivery date picker in checkout
  saw: that gift buyers ask for delivery on a specific day
  change: letting customers choose a delivery day in checkout
  now: Earliest possible delivery only.
  arms: {date-picker: "Calendar to choose a delivery day up to 14 days ahead."}
  insight: ""
  tags: [delivery-options, gifting]
  status: running
  start: 2025-12-08
"""

GOALS = {
    "social-proof": ["reassure hesitant shoppers and increase conversion", "help visitors choose and order more often"],
    "urgency": ["nudge undecided visitors to order now", "turn more visits into orders without hurting trust"],
    "shipping-cost": [
        "remove a late surprise and increase conversion",
        "raise the share of visits that end in an order",
    ],
    "trust-signals": ["reassure first-time buyers and increase conversion", "lower the doubts that stop first orders"],
    "product-imagery": ["let visitors judge the product better and order more often", "increase conversion"],
    "navigation": ["help visitors find the right product sooner and increase conversion", "increase conversion"],
    "checkout-friction": ["reduce drop-off and increase completed orders", "turn more started checkouts into orders"],
    "pricing-display": [
        "make the value clearer and increase conversion",
        "make prices easier to compare and lift conversion",
    ],
    "personalisation": ["show more relevant products and increase conversion", "increase conversion"],
    "copywriting": ["make the offer clearer and increase conversion", "answer questions earlier and increase orders"],
}
WHO = {
    "home": ["first-time visitors", "visitors arriving from email and social"],
    "search": ["visitors who search", "visitors with vague queries"],
    "category-page": ["visitors browsing a category", "mobile visitors on long lists"],
    "product-page": ["visitors comparing products", "first-time buyers"],
    "basket": ["visitors with a full basket", "first-time buyers"],
    "checkout": ["first-time buyers", "mobile shoppers"],
}
#: how often a hypothesis names its audience: one draw in three leaves it out (every visitor)
HYPOTHESIS_FORMS = ["every visitor", "audience", "audience"]
CONTROL_TEXT = ["{now}", "As live today. {now}", "Current version. {now}"]
WEEKDAYS = ["Mondays", "Tuesdays", "Wednesdays", "Thursdays", "Fridays", "Saturdays", "Sundays"]


def true_effects() -> dict[str, tuple[float, float]]:
    """The true effect per theme: {theme: (mean log risk ratio, tau)}."""
    return dict(TRUE_EFFECTS)


def is_slug(text: str) -> bool:
    return all(part.isalnum() and part == part.lower() for part in text.split("-"))


def load_ideas() -> list[dict[str, Any]]:
    ideas = yaml.safe_load(IDEAS_YAML)
    for item in ideas:
        item["theme"], item["area"], item["slug"] = item.pop("at")
        item["start"] = item.get("start")  # YAML reads pinned dates as dates
        assert all(is_slug(a) and isinstance(d, str) and d for a, d in item["arms"].items()), item["slug"]
        follow = item.get("followup", {})
        assert set(follow) <= {"kind", "slug", "title", "change", "arm"}, item["slug"]
        assert all(isinstance(v, str) for v in follow.values()), item["slug"]
    return ideas


# --- simulation -----------------------------------------------------------------------------------------


@dataclass
class ArmSim:
    """Simulated results of one arm, per cell (device x traffic source); money in cents."""

    visitors: np.ndarray
    conversions: np.ndarray
    revenue: np.ndarray
    orders: int
    sum_of_squares: int  # sum over visitors of (revenue in cents)^2
    order_cents: np.ndarray
    extreme_cents: int = 0

    def totals(self) -> tuple[int, int, int]:
        return int(self.visitors.sum()), int(self.conversions.sum()), int(self.revenue.sum())


@dataclass(eq=False)
class Test:
    idea: dict[str, Any]
    id: str
    status: str
    started: dt.date | None
    ended: dt.date | None
    arms: dict[str, str]  # name -> description; the first is control
    truth: dict[str, Any]  # log_rr (arm -> true log risk ratio, or per device), base_rate, order_value, value_shift
    plan: dict[str, Any]
    parent: Test | None = None
    sims: dict[str, ArmSim] = field(default_factory=dict)
    segment_dims: list[str] = field(default_factory=list)
    preregistered: bool = False
    odd_days: bool = False
    decision: dict[str, Any] | None = None
    questionable: bool = False
    record: dict[str, Any] = field(default_factory=dict)
    orders_rows: list[tuple[str, str, str]] = field(default_factory=list)

    @property
    def variants(self) -> list[str]:
        return list(self.arms)[1:]


def _cell_layout() -> tuple[np.ndarray, np.ndarray, np.ndarray, list[tuple[str, str]]]:
    """Default cell shares, conversion factors (mean 1) and order value factors of device x source cells."""
    cells = [(d, s) for d in DEVICES for s in SOURCES]
    share = np.array([DEVICES[d][0] * SOURCES[s][0] for d, s in cells])
    conv = np.array([DEVICES[d][1] * SOURCES[s][1] for d, s in cells])
    value = np.array([DEVICES[d][2] for d, _ in cells])
    return share, conv / float(share @ conv), value, cells


CELL_SHARE, CELL_CONV, CELL_VALUE, CELLS = _cell_layout()


def cell_shares(mobile_share: float | None) -> np.ndarray:
    if mobile_share is None:
        return CELL_SHARE
    default_mobile = DEVICES["mobile"][0]
    scale = np.array(
        [
            mobile_share / default_mobile if d == "mobile" else (1 - mobile_share) / (1 - default_mobile)
            for d, _ in CELLS
        ]
    )
    return CELL_SHARE * scale


def simulate_arm(
    rng: np.random.Generator,
    visitors: int,
    shares: np.ndarray,
    rates: np.ndarray,
    order_value: float,
    extremes: list[float],
) -> ArmSim:
    by_cell = rng.multinomial(visitors, shares / shares.sum())
    conversions = rng.binomial(by_cell, np.clip(rates, 0, 0.9))
    buyers = int(conversions.sum())
    buyer_cell = np.repeat(np.arange(len(by_cell)), conversions)
    orders_each = rng.geometric(REPEAT_ORDER_P, size=buyers)
    order_buyer = np.repeat(np.arange(buyers), orders_each)
    mu = math.log(order_value) - ORDER_VALUE_SIGMA**2 / 2 + np.log(CELL_VALUE[buyer_cell[order_buyer]])
    cents = np.clip(np.rint(rng.lognormal(mu, ORDER_VALUE_SIGMA) * 100), 600, 150_000).astype(np.int64)
    extreme_total = 0
    if extremes:
        where = rng.choice(len(cents), size=len(extremes), replace=False)
        cents[where] = np.rint(np.array(extremes) * 100).astype(np.int64)
        extreme_total = int(cents[where].sum())
    per_buyer = np.zeros(buyers, dtype=np.int64)
    np.add.at(per_buyer, order_buyer, cents)
    revenue = np.zeros(len(by_cell), dtype=np.int64)
    np.add.at(revenue, buyer_cell, per_buyer)
    return ArmSim(by_cell, conversions, revenue, len(cents), int((per_buyer * per_buyer).sum()), cents, extreme_total)


def simulate_test(rng: np.random.Generator, t: Test, share_of_plan: float) -> None:
    idea = t.idea
    names = list(t.arms)
    split = np.array([t.plan["split"][a] for a in names])
    split = split / split.sum()
    if idea.get("special", "").startswith("srm"):
        split = np.array(SRM_SPLIT)
    total = int(round(t.plan["visitors_per_arm"] * len(names) * share_of_plan))
    per_arm = rng.multinomial(total, split)
    mix = MIX_SHIFT.get(idea["slug"]) if t.parent is None else None
    for name, visitors in zip(names, per_arm, strict=True):
        effect = t.truth["log_rr"][name]
        per_device = effect if isinstance(effect, dict) else dict.fromkeys(DEVICES, effect)
        log_rr = np.array([per_device[d] for d, _ in CELLS])
        rates = t.truth["base_rate"] * CELL_CONV * np.exp(log_rr)
        if name != names[0] and idea.get("special", "").startswith("srm") and t.parent is None:
            lost = 1 - SRM_SPLIT[1] / SRM_SPLIT[0]  # bounced before the redirect finished; rarely buyers
            rates = rates * (1 - 0.2 * lost) / (1 - lost)
        shares = cell_shares(mix["mobile_share"][name] if mix else None)
        value = t.truth["order_value"] * math.exp(t.truth["value_shift"][name])
        extremes = (idea.get("extremes") or {}).get(name, []) if t.parent is None else []
        t.sims[name] = simulate_arm(rng, int(visitors), shares, rates, value, extremes)


# --- plans and statistics -------------------------------------------------------------------------------

_Z = NormalDist()


def sample_size(baseline: float, lift: float, alpha: float = 0.05, power: float = 0.8) -> int:
    """Visitors per arm for a two-sided two-proportion z-test to detect a relative lift."""
    p1, p2 = baseline, baseline * (1 + lift)
    p_bar = (p1 + p2) / 2
    z_a, z_b = _Z.inv_cdf(1 - alpha / 2), _Z.inv_cdf(power)
    root = z_a * math.sqrt(2 * p_bar * (1 - p_bar)) + z_b * math.sqrt(p1 * (1 - p1) + p2 * (1 - p2))
    return math.ceil(root**2 / (p2 - p1) ** 2)


def lift_for(baseline: float, visitors: float) -> float:
    """The minimum lift (rounded up to a whole percent) that ``visitors`` per arm can detect."""
    lo, hi = 0.005, 1.0
    for _ in range(60):
        mid = (lo + hi) / 2
        lo, hi = (mid, hi) if sample_size(baseline, mid) > visitors else (lo, mid)
    return min(math.ceil(hi * 100) / 100, 0.30)


@dataclass(frozen=True)
class Comparison:
    rate0: float
    rate1: float
    lift: float
    p: float
    low: float
    high: float


def compare(c0: int, n0: int, c1: int, n1: int) -> Comparison:
    r0, r1 = c0 / n0, c1 / n1
    pooled = (c0 + c1) / (n0 + n1)
    z = (r1 - r0) / math.sqrt(pooled * (1 - pooled) * (1 / n0 + 1 / n1))
    se = math.sqrt(1 / max(c1, 1) - 1 / n1 + 1 / max(c0, 1) - 1 / n0)
    log_rr = math.log(max(r1, 1e-9) / r0)
    return Comparison(
        r0,
        r1,
        r1 / r0 - 1,
        2 * (1 - _Z.cdf(abs(z))),
        math.exp(log_rr - 1.96 * se) - 1,
        math.exp(log_rr + 1.96 * se) - 1,
    )


def fmt_p(p: float) -> str:
    return "p < 0.001" if p < 0.001 else f"p = {p:.3f}" if p < 0.1 else f"p = {p:.2f}"


def comparisons(t: Test) -> dict[str, Comparison]:
    n0, c0, _ = t.sims[list(t.arms)[0]].totals()
    out = {}
    for name in t.variants:
        n1, c1, _ = t.sims[name].totals()
        out[name] = compare(c0, n0, c1, n1)
    return out


def by_device(t: Test, arm: str) -> dict[str, tuple[int, int]]:
    sim = t.sims[arm]
    out = {d: (0, 0) for d in DEVICES}
    for k, (d, _) in enumerate(CELLS):
        n, c = out[d]
        out[d] = (n + int(sim.visitors[k]), c + int(sim.conversions[k]))
    return out


def device_lifts(t: Test, arm: str) -> dict[str, float]:
    control, variant = by_device(t, list(t.arms)[0]), by_device(t, arm)
    return {d: compare(*control[d][::-1], *variant[d][::-1]).lift for d in DEVICES}


def rpv_and_aov(t: Test, arm: str, drop_extremes: bool = False) -> tuple[float, float]:
    def figures(name: str) -> tuple[float, float]:
        sim = t.sims[name]
        n, _, revenue = sim.totals()
        orders = sim.orders
        if drop_extremes and sim.extreme_cents:
            revenue -= sim.extreme_cents
            orders -= len((t.idea.get("extremes") or {}).get(name, []))
        return revenue / n, revenue / orders

    rpv0, aov0 = figures(list(t.arms)[0])
    rpv1, aov1 = figures(arm)
    return rpv1 / rpv0 - 1, aov1 / aov0 - 1


# --- building the tests ---------------------------------------------------------------------------------


def next_weekday(day: dt.date, rng: np.random.Generator) -> dt.date:
    monday = day + dt.timedelta(days=(7 - day.weekday()) % 7)
    return monday + dt.timedelta(days=int(rng.random() < 0.3))


def schedule(rng: np.random.Generator, ideas: list[dict[str, Any]]) -> list[tuple[dict[str, Any], dt.date]]:
    """Start dates of first rounds: pinned ones as given, the rest spread evenly over the years in random order."""
    free = [ideas[k] for k in rng.permutation(len(ideas)) if ideas[k]["start"] is None]
    late = int(len(free) * 0.75)  # tests with a second round start early enough for it to finish
    for k in range(late, len(free)):
        if "followup" in free[k]:
            j = next(j for j in rng.permutation(late) if "followup" not in free[j])
            free[j], free[k] = free[k], free[j]
    step = (LAST_DAY - FIRST_DAY).days / (len(free) - 1)
    out = []
    for k, item in enumerate(free):
        day = FIRST_DAY + dt.timedelta(days=round(k * step) + int(rng.integers(-4, 4)))
        out.append((item, next_weekday(max(day, FIRST_DAY), rng)))
    out += [(item, item["start"]) for item in ideas if item["start"] is not None]
    return sorted(out, key=lambda pair: (pair[1], pair[0]["slug"]))


def draw_truth(
    rng: np.random.Generator, idea: dict[str, Any], arms: list[str], started: dt.date | None, first_round: bool
) -> dict[str, Any]:
    mean, tau = TRUE_EFFECTS[idea["theme"]]
    log_rr: dict[str, Any] = {arms[0]: 0.0}
    for name in arms[1:]:
        log_rr[name] = mean + tau * float(rng.standard_normal())
        if first_round and idea["slug"] in DEVICE_EFFECTS:
            log_rr[name] = dict(DEVICE_EFFECTS[idea["slug"]])
        if first_round and idea["slug"] in MIX_SHIFT:
            log_rr[name] = MIX_SHIFT[idea["slug"]]["effect"]
    truth: dict[str, Any] = {"log_rr": log_rr}
    season = 1.2 if started is not None and started.month in (11, 12) else 1.0
    truth["base_rate"] = BASELINE[idea["area"]] * season * math.exp(0.12 * float(rng.standard_normal()))
    truth["order_value"] = float(rng.uniform(45, 70))
    shifts = idea.get("aov") or {}
    truth["value_shift"] = {
        a: (0.0 if i == 0 else shifts.get(a, 0.015 * float(rng.standard_normal()))) for i, a in enumerate(arms)
    }
    return truth


def make_plan(rng: np.random.Generator, idea: dict[str, Any], arms: list[str], base_rate: float) -> dict[str, Any]:
    baseline = round(base_rate * math.exp(0.06 * float(rng.standard_normal())), 4)
    low, high = idea.get("n") or (25_000, 120_000)
    target = math.exp(rng.uniform(math.log(low), math.log(high)))
    lift = lift_for(baseline, target)
    n = sample_size(baseline, lift)
    daily = DAILY_VISITORS[idea["area"]] * rng.uniform(0.8, 1.2)
    days = int(min(max(math.ceil(n * len(arms) / daily / 7) * 7, 14), 42))
    if idea.get("special") in ("stopped-peek", "stopped-bug"):
        days = 42 if idea["special"] == "stopped-peek" else 35
    k = len(arms)
    share = {2: 0.5, 4: 0.25, 5: 0.2}.get(k, 1.0)
    return {
        "baseline_rate": baseline,
        "minimum_lift": lift,
        "alpha": 0.05,
        "power": 0.8,
        "visitors_per_arm": n,
        "days": days,
        "split": {a: share for a in arms},
        "segments": [],
    }


def new_test(
    rng: np.random.Generator,
    idea: dict[str, Any],
    started: dt.date | None,
    arms: dict[str, str],
    parent: Test | None = None,
) -> Test:
    names = list(arms)
    truth = draw_truth(rng, idea, names, started, parent is None)
    plan = make_plan(rng, idea, names, truth["base_rate"])
    status = idea.get("status", "finished")
    if parent is None and idea.get("special") in ("stopped-peek", "stopped-bug"):
        status = "stopped-early"
    month = started.strftime("%Y-%m") if started else "2026-01"
    return Test(idea, f"{month}-{idea['slug']}", status, started, None, arms, truth, plan, parent)


def run(rng: np.random.Generator, t: Test, odd_days: bool) -> None:
    """Decide the duration, then simulate the traffic of that duration."""
    if t.status == "planned":
        return
    days = t.plan["days"]
    special = t.idea.get("special") if t.parent is None else None
    if t.status == "running":  # about 45% of the planned traffic so far
        simulate_test(rng, t, 0.45)
        return
    if special == "stopped-peek":
        ran = 15
    elif special == "stopped-bug":
        ran = 16
    elif odd_days:
        ran = int(np.clip(days + rng.choice([-5, -4, -3, 2, 3, 4, 5]), 15, 41))
        ran += int(ran % 7 == 0)
        t.odd_days = True
    else:
        ran = days
    assert t.started is not None
    t.ended = t.started + dt.timedelta(days=ran - 1)
    stopped = special in ("stopped-peek", "stopped-bug")  # the others ran until the planned sample was reached
    simulate_test(rng, t, (ran / days if stopped else 1.0) * rng.uniform(1.04, 1.10))


# --- decisions and texts --------------------------------------------------------------------------------


def duration(t: Test) -> int:
    assert t.started is not None and t.ended is not None
    return (t.ended - t.started).days + 1


def and_list(words: list[str]) -> str:
    return words[0] if len(words) == 1 else ", ".join(words[:-1]) + " and " + words[-1]


def pick(rng: np.random.Generator, options: list[str]) -> str:
    return options[int(rng.integers(len(options)))]


def decide(t: Test, txt: np.random.Generator) -> None:
    """The decision the team took: mostly what the data say, plus the flaws the idea asks for."""
    cmp = comparisons(t)
    best = max(t.variants, key=lambda a: cmp[a].lift)
    c = cmp[best]
    won, lost = c.p < 0.05 and c.lift > 0, c.p < 0.05 and c.lift < 0
    numbers = f"{c.lift:+.1%}, {fmt_p(c.p)}"
    special = t.idea.get("special") if t.parent is None else None
    follow = t.idea.get("followup") if t.parent is None else None
    outcome, arm, why, doubtful = "keep-control", None, "", False
    if special == "stopped-bug":
        why = (
            "Stopped early because the address lookup filled in wrong postcodes for Belgian addresses with box numbers."
        )
    elif special == "stopped-peek":
        if c.lift > 0:
            outcome, arm, doubtful = "ship", best, True
            why = f"The variant was ahead ({numbers}) after {duration(t)} days, so we stopped and shipped."
        else:
            why = f"Stopped early with the variant behind ({numbers}); not worth the remaining traffic."
    elif special == "srm-ship":
        outcome, arm, doubtful = "ship", best, True
        why = f"Shipped on the observed lift ({numbers}); the uneven split was only noticed afterwards."
    elif special == "srm-discard":
        n0, n1 = (t.sims[a].totals()[0] for a in t.arms)
        split = f"{n0 / (n0 + n1):.1%}/{n1 / (n0 + n1):.1%}"
        why = f"Split of {split} instead of 50/50, so the result ({numbers}) is not trusted."
    elif special in ("srm-rerun", "simpson"):
        outcome, arm = "iterate", best
        why = (
            f"The split of visitors is broken, so the result ({numbers}) is not trusted; rerun once the "
            "assignment is fixed."
            if special == "srm-rerun"
            else f"Overall {numbers}, but the arms got very different device mixes; rerun with the routing fixed."
        )
    elif special == "liked":
        outcome, arm, doubtful = "ship", best, not won
        why = (
            f"Not significant ({numbers}), but the team and the brand lead preferred the new design, so it shipped."
            if not won
            else f"{best} won ({numbers}) and the team liked it; shipped."
        )
    elif special == "segment-ship":
        lifts = device_lifts(t, best)
        device = max(lifts, key=lifts.__getitem__)
        outcome, arm, doubtful = "ship", best, not won
        why = f"Overall {numbers}, but {device} looked {lifts[device]:+.1%}, so it shipped for everyone."
    elif special == "best-of-many":
        outcome, arm, doubtful = "ship", best, c.p > 0.05 / len(t.variants)
        why = f"{best} was the best of {len(t.variants)} variants ({numbers}); shipped."
    elif special == "device-split" and (lifts := device_lifts(t, best))["desktop"] > 0 > lifts["mobile"]:
        outcome, arm = "iterate", best
        why = (
            f"Desktop {lifts['desktop']:+.1%} but mobile {lifts['mobile']:+.1%}; rebuild for desktop only, test again."
        )
    elif follow and follow["kind"] == "reduce":
        outcome, arm = "iterate", best
        why = f"{best} was the best of {len(t.variants)} variants ({numbers}); next we test it alone against control."
    elif follow and not won:
        outcome, arm = "iterate", best
        why = pick(
            txt,
            [
                f"Promising ({numbers}) but not conclusive; {best} goes into a refined second round.",
                f"Not conclusive ({numbers}); the idea stays, the execution changes in round two.",
            ],
        )
    elif won:
        outcome, arm = "ship", best
        why = pick(
            txt,
            [
                f"{best} won clearly ({numbers}); rolled out to all visitors.",
                f"Clear improvement ({numbers}), revenue per visitor {rpv_and_aov(t, best)[0]:+.1%}; {best} is "
                "live for everyone.",
            ],
        )
    elif lost:
        arm = list(t.arms)[0] if txt.random() < 0.3 else None
        why = pick(
            txt, [f"{best} lowered conversion ({numbers}); reverted.", f"Worse than control ({numbers}); dropped."]
        )
    elif c.lift > 0 and c.p < 0.3 and txt.random() < 0.5:
        outcome, arm = "iterate", best
        why = f"A positive trend ({numbers}) that is not conclusive; we will try a stronger version of {best}."
    else:
        why = pick(
            txt,
            [
                f"No reliable difference ({numbers}); not worth the extra maintenance, control stays.",
                f"The variant did not beat control ({numbers}); we keep the current {t.idea['area']}.",
            ],
        )
    assert t.ended is not None
    decided = t.ended + dt.timedelta(days=int(txt.integers(2, 9)))
    t.decision = {"outcome": outcome, "arm": arm, "rationale": why, "decided": decided}
    t.questionable = doubtful


def learnings(t: Test, txt: np.random.Generator) -> list[str]:
    cmp = comparisons(t)
    control = list(t.arms)[0]
    best = max(t.variants, key=lambda a: cmp[a].lift)
    c = cmp[best]
    special = t.idea.get("special") if t.parent is None else None
    out = []
    if len(t.variants) > 1:
        rates = {control: cmp[best].rate0, **{a: cmp[a].rate1 for a in t.variants}}
        ranking = ", ".join(f"{a} {r:.2%}" for a, r in sorted(rates.items(), key=lambda kv: -kv[1]))
        out.append(f"Conversion by arm was {ranking}; best variant {best} at {c.lift:+.1%} ({fmt_p(c.p)}).")
    else:
        mde = t.plan["minimum_lift"]
        verdict = (
            "a clear win"
            if c.p < 0.05 and c.lift > 0
            else "a clear loss"
            if c.p < 0.05
            else "too small to tell apart from noise at this sample size"
        )
        out.append(
            pick(
                txt,
                [
                    f"Conversion {c.rate0:.2%} in control and {c.rate1:.2%} with {best} ({c.lift:+.1%}, {fmt_p(c.p)}).",
                    f"The {best} arm changed conversion by {c.lift:+.1%} (95% interval {c.low:+.1%} to {c.high:+.1%}).",
                    f"Observed lift {c.lift:+.1%} against a planned minimum of {mde:.0%}, {verdict}.",
                ],
            )
        )
    if t.idea.get("insight") and (txt.random() < 0.85 or special):
        out.append(" ".join(t.idea["insight"].split()))
    n_arm = min(s.totals()[0] for s in t.sims.values())
    if special and special.startswith("srm"):
        n0, n1 = (t.sims[a].totals()[0] for a in t.arms)
        out.append(
            f"Visitors split {n0 / (n0 + n1):.1%} / {n1 / (n0 + n1):.1%} against a planned 50/50 because the variant "
            "was served through a client-side redirect that lost visitors on slow mobile connections. The "
            "same redirect served every test that spring."
        )
    elif special == "simpson":
        lifts = device_lifts(t, best)
        mobile = {a: by_device(t, a)["mobile"][0] / t.sims[a].totals()[0] for a in t.arms}
        verb = "won" if lifts["desktop"] > 0 and lifts["mobile"] > 0 else "did"
        out.append(
            f"Overall {c.lift:+.1%}, yet the variant {verb} {lifts['desktop']:+.1%} on desktop and "
            f"{lifts['mobile']:+.1%} on mobile; the app's in-app browser always got the new menu, so mobile was "
            f"{mobile[best]:.0%} of the variant's visitors against {mobile[control]:.0%} in control."
        )
    elif special == "device-split":
        lifts = device_lifts(t, best)
        note = ", ".join(f"{d} {lifts[d]:+.1%}" for d in DEVICES)
        caution = "" if t.preregistered else " The device cut was not pre-registered, so treat it as a lead."
        expected = DEVICE_EFFECTS[t.idea["slug"]]
        hi, lo = max(expected, key=expected.__getitem__), min(expected, key=expected.__getitem__)
        why = t.idea["device_note"] if lifts[hi] > lifts[lo] else f"the {hi} advantage we expected did not show"
        out.append(f"By device {note}; {why}.{caution}")
    elif special == "stopped-peek":
        out.append(
            f"Stopped at {n_arm:,} visitors per arm, {n_arm / t.plan['visitors_per_arm']:.0%} of the planned "
            f"{t.plan['visitors_per_arm']:,}."
        )
    elif special == "stopped-bug":
        out.append(
            f"Stopped after {duration(t)} days with {n_arm:,} of the planned "
            f"{t.plan['visitors_per_arm']:,} visitors per arm."
        )
    elif any(s.extreme_cents for s in t.sims.values()):
        arm = next(a for a, s in t.sims.items() if s.extreme_cents)
        biggest = max(t.idea["extremes"][arm])
        what = "a hotel's order of 300 pillar candles" if biggest < 3000 else "a bulk order of wedding table linen"
        rpv = rpv_and_aov(t, best)[0]
        rpv_clean = rpv_and_aov(t, best, drop_extremes=True)[0]
        out.append(
            f"One {biggest:,.0f} EUR order ({what}) landed in {arm}; without the large orders the variant's "
            f"revenue per visitor is {rpv_clean:+.1%} instead of {rpv:+.1%}."
        )
    elif t.odd_days:
        days, first = duration(t), t.started.weekday()
        extra = [WEEKDAYS[(first + k) % 7] for k in range(days % 7)]
        short = [WEEKDAYS[(first + k) % 7] for k in range(days % 7, 7)]
        skew = f"{and_list(extra)} count once more" if len(extra) <= 3 else f"{and_list(short)} count once less"
        out.append(f"Ran {days} days rather than whole weeks, so {skew} than the other days.")
    elif txt.random() < 0.4:
        rpv, aov = rpv_and_aov(t, best)
        out.append(f"Revenue per visitor {rpv:+.1%} and average order value {aov:+.1%} for {best}.")
    return out[:3]


def hypothesis(t: Test, txt: np.random.Generator) -> dict[str, str]:
    """The four parts of a hypothesis: what changes, for whom, the effect expected, what was observed."""
    idea = t.idea
    goal = pick(txt, GOALS[idea["theme"]])
    who = pick(txt, WHO[idea["area"]])
    if t.parent is not None:
        p = t.parent
        arm = p.decision["arm"] if p.decision and p.decision["arm"] else p.variants[0]
        c = comparisons(p)[arm]
        saw = f"{arm} at {c.lift:+.1%} ({fmt_p(c.p)}) in {p.id}"
        if idea["followup"]["kind"] == "rerun":
            reason = "an uneven split of visitors" if p.idea.get("special") == "srm-rerun" else "uneven device mixes"
            saw = f"that {p.id} could not be read because of {reason}"
        return {"change": idea["followup"]["change"], "expected": goal, "observed": saw}
    form = pick(txt, HYPOTHESIS_FORMS)
    audience = {} if form == "every visitor" else {"audience": who}
    return {"change": idea["change"], **audience, "expected": goal, "observed": idea["saw"]}


# --- records --------------------------------------------------------------------------------------------


class Flow(dict):  # type: ignore[type-arg]
    """A mapping written on one line."""


class _Dumper(yaml.SafeDumper):
    def increase_indent(self, flow: bool = False, indentless: bool = False) -> None:
        super().increase_indent(flow, False)


_Dumper.add_representer(Flow, lambda d, data: d.represent_mapping("tag:yaml.org,2002:map", data, flow_style=True))


def money(cents: int) -> float:
    return round(cents / 100, 2)


def segments(t: Test) -> dict[str, Any]:
    out: dict[str, Any] = {}
    for dim in t.segment_dims:
        values = list(DEVICES) if dim == "device" else list(SOURCES)
        out[dim] = {}
        for value in values:
            cells = [k for k, (d, s) in enumerate(CELLS) if (d if dim == "device" else s) == value]
            out[dim][value] = {
                arm: Flow(
                    visitors=int(sim.visitors[cells].sum()),
                    conversions=int(sim.conversions[cells].sum()),
                    revenue=money(int(sim.revenue[cells].sum())),
                )
                for arm, sim in t.sims.items()
            }
    return out


def arm_entries(t: Test, with_squares: bool) -> list[dict[str, Any]]:
    entries = []
    for i, (name, description) in enumerate(t.arms.items()):
        entry: dict[str, Any] = {"name": name}
        if i == 0:
            entry["control"] = True
        entry["description"] = description
        sim = t.sims.get(name)
        if sim is not None:
            n, c, revenue = sim.totals()
            entry.update(visitors=n, conversions=c, orders=sim.orders, revenue=money(revenue))
            if with_squares:  # sum of squares in cents^2 -> EUR^2, rounded up to keep Cauchy-Schwarz
                entry["revenue_sum_of_squares"] = math.ceil(sim.sum_of_squares / 100) / 100
        entries.append(entry)
    return entries


def links(t: Test, txt: np.random.Generator) -> list[dict[str, str]]:
    if txt.random() > 0.45:
        return []
    options = [
        {"label": "Results dashboard", "url": f"https://dash.brindlewick.example/tests/{t.id}"},
        {"label": "Design file", "url": f"https://design.brindlewick.example/files/{t.idea['slug']}"},
        {"label": "Write-up", "url": f"https://wiki.brindlewick.example/experiments/{t.id}"},
        {"label": "Ticket", "url": f"https://tickets.brindlewick.example/t/{int(txt.integers(1200, 4800))}"},
    ]
    chosen = txt.choice(len(options), size=int(txt.integers(1, 3)), replace=False)
    return [options[k] for k in sorted(chosen)]


def build_record(t: Test, txt: np.random.Generator) -> dict[str, Any]:
    idea = t.idea
    tags = list(idea.get("tags", []))
    tags += ["multi-arm"] if len(t.arms) > 2 else []
    tags += ["peak-season"] if t.started and t.started.month in (11, 12) else []
    tags += ["second-round"] if t.parent else []
    tags += (
        ["data-quality"]
        if idea.get("special") in ("srm-ship", "srm-discard", "srm-rerun", "simpson") and not t.parent
        else []
    )
    owners = ["content team"] + OWNERS[idea["area"]] if idea["theme"] == "copywriting" else OWNERS[idea["area"]]
    plan = {k: v for k, v in t.plan.items() if v or k in ("alpha", "power")}
    plan["split"] = Flow(plan["split"])
    rec: dict[str, Any] = {
        "id": t.id,
        "title": idea["title"],
        "status": t.status,
        "owner": pick(txt, owners),
        "started": t.started,
        "ended": t.ended,
        "page_area": idea["area"],
        "themes": [idea["theme"], *idea.get("also", [])],
        "tags": list(dict.fromkeys(tags)),
        "iterates_on": t.parent.id if t.parent else None,
        "hypothesis": hypothesis(t, txt),
        "plan": plan,
        "arms": arm_entries(t, with_squares=t.started is not None and t.started >= dt.date(2023, 4, 1)),
        "orders_file": f"{t.id}-orders.csv" if idea.get("special") == "orders" and not t.parent else None,
        "segments": segments(t),
        "decision": t.decision,
        "learnings": learnings(t, txt) if t.decision else [],
        "links": links(t, txt),
    }
    if rec["decision"] is not None:
        rec["decision"] = {k: v for k, v in rec["decision"].items() if v is not None}
    return {k: v for k, v in rec.items() if v not in (None, [], {})}


def orders_rows(t: Test, rng: np.random.Generator) -> list[tuple[str, str, str]]:
    rows = [(arm, f"{cents / 100:.2f}") for arm, sim in t.sims.items() for cents in sim.order_cents.tolist()]
    order = rng.permutation(len(rows))  # the export lists orders as they came in, arms mixed
    start = int(rng.integers(100_000, 900_000))
    return [(rows[k][0], f"BW{start + i:07d}", rows[k][1]) for i, k in enumerate(order)]


def build_archive(seed: int = SEED) -> list[Test]:
    """Simulate every test; returns them with their true effects, records and order rows."""
    rng = np.random.default_rng(seed)
    txt = np.random.default_rng([seed, 1])
    ideas = load_ideas()
    first = [i for i in ideas if i.get("status") is None]
    upcoming = [i for i in ideas if i.get("status") is not None]
    tests = []
    for idea, started in schedule(rng, first):
        arms = {"control": pick(txt, CONTROL_TEXT).format(now=idea["now"]), **idea["arms"]}
        tests.append(new_test(rng, idea, started, arms))
    plain = [k for k, t in enumerate(tests) if "special" not in t.idea and "followup" not in t.idea]
    odd = set(rng.choice(plain, size=5, replace=False).tolist())
    for k, t in enumerate(tests):
        run(rng, t, k in odd)
        decide(t, txt)
    children = []
    for parent in [t for t in tests if "followup" in t.idea]:
        children.append(second_round(rng, txt, parent))
    tests += children
    for idea in upcoming:
        arms = {"control": idea["now"], **idea["arms"]}
        t = new_test(rng, idea, idea["start"], arms)
        run(rng, t, False)
        tests.append(t)
    choose_segments(rng, tests)
    for t in tests:
        t.record = build_record(t, txt)
        if "orders_file" in t.record:
            t.orders_rows = orders_rows(t, rng)
    return sorted(tests, key=lambda t: t.id)


def second_round(rng: np.random.Generator, txt: np.random.Generator, parent: Test) -> Test:
    f = parent.idea["followup"]
    assert parent.decision is not None and parent.ended is not None
    carried = parent.decision["arm"]
    shipped = parent.decision["outcome"] == "ship"
    if f["kind"] == "rerun":
        arms = dict(parent.arms)
    elif f["kind"] == "reduce":
        arms = {"control": parent.arms["control"], carried: parent.arms[carried]}
    else:
        control = f"The shipped {carried} version from {parent.id}." if shipped else parent.arms["control"]
        arms = {"control": control, f"{carried}-v2": f["arm"]}
    idea = {k: v for k, v in parent.idea.items() if k not in ("special", "extremes", "n", "aov")}
    idea.update(slug=f["slug"], title=f["title"], change=f["change"])
    started = next_weekday(parent.ended + dt.timedelta(days=int(rng.integers(10, 36))), rng)
    child = new_test(rng, idea, started, arms, parent)
    run(rng, child, False)
    assert child.ended is not None and child.ended <= dt.date(2025, 12, 31), child.id
    decide(child, txt)
    return child


def choose_segments(rng: np.random.Generator, tests: list[Test]) -> None:
    """Segments for the tests that need them and a sample of others; pre-registered for some."""
    done = [t for t in tests if t.status in ("finished", "stopped-early")]
    must = [
        t for t in done if t.parent is None and t.idea.get("special") in ("device-split", "simpson", "segment-ship")
    ]
    others = [t for t in done if t not in must and t.idea.get("special") != "orders"]
    for k in rng.choice(len(others), size=12, replace=False).tolist():
        must.append(others[k])
    for t in sorted(must, key=lambda t: t.id):
        t.segment_dims = ["device", "traffic-source"] if rng.random() < 0.75 or t in must[:3] else ["device"]
        t.preregistered = t.idea["slug"] == "larger-gallery" or (
            t.idea.get("special") not in ("device-split", "segment-ship") and rng.random() < 0.5
        )
        if t.preregistered:
            t.plan["segments"] = list(t.segment_dims)
    for t in tests:
        if t.status == "planned" and t.idea["slug"] == "scent-finder-quiz":
            t.plan["segments"] = ["device"]


# --- files ----------------------------------------------------------------------------------------------


def render(record: dict[str, Any]) -> str:
    body = yaml.dump(record, Dumper=_Dumper, sort_keys=False, allow_unicode=True, width=110, default_flow_style=False)
    return HEADER + body


def remove_previous(folder: Path) -> None:
    """Delete the files an earlier run wrote (records starting with HEADER and the orders files they name)."""
    for path in sorted(folder.glob("*.yaml")):
        text = path.read_text(encoding="utf-8")
        if not text.startswith(HEADER):
            continue
        data = yaml.safe_load(text)
        orders = data.get("orders_file") if isinstance(data, dict) else None
        if isinstance(orders, str) and "/" not in orders and "\\" not in orders and orders.endswith(".csv"):
            (folder / orders).unlink(missing_ok=True)
        path.unlink()


def write_archive(tests: list[Test], folder: Path) -> None:
    folder.mkdir(parents=True, exist_ok=True)
    remove_previous(folder)
    files: dict[Path, str] = {}
    for t in tests:
        files[folder / f"{t.id}.yaml"] = render(t.record)
        if t.orders_rows:
            lines = ["arm,order_id,value"] + [",".join(row) for row in t.orders_rows]
            files[folder / t.record["orders_file"]] = "\n".join(lines) + "\n"
    for target in files:
        if target.exists():
            raise SystemExit(f"{target} exists and was not written by this script; move it away first")
    for target, text in files.items():
        target.write_text(text, encoding="utf-8", newline="\n")


def summary(tests: list[Test]) -> str:
    def table(counter: Counter[Any]) -> str:
        return ", ".join(f"{k}: {v}" for k, v in sorted(counter.items(), key=lambda kv: (-kv[1], str(kv[0]))))

    decided = [t for t in tests if t.decision]
    lines = [
        f"{len(tests)} tests",
        "status: " + table(Counter(t.status for t in tests)),
        "themes: " + table(Counter(th for t in tests for th in t.record["themes"])),
        "page areas: " + table(Counter(t.idea["area"] for t in tests)),
        "arms: " + table(Counter(len(t.arms) for t in tests)),
        f"with segments: {sum(bool(t.segment_dims) for t in tests)}, pre-registered: "
        f"{sum(bool(t.record.get('plan', {}).get('segments')) for t in tests)}, orders files: "
        f"{sum(bool(t.orders_rows) for t in tests)}, second rounds: {sum(t.parent is not None for t in tests)}, "
        f"odd durations: {sum(t.odd_days for t in tests)}",
        "outcomes: " + table(Counter(t.decision["outcome"] for t in decided if t.decision)),
        "questionable decisions: " + ", ".join(t.id for t in tests if t.questionable),
        "significant wins (p < 0.05, any variant): "
        f"{sum(any(c.p < 0.05 and c.lift > 0 for c in comparisons(t).values()) for t in decided)} of {len(decided)}",
        "true effects (theme: mean log RR, tau, mean relative lift):",
    ]
    lines += [f"  {th}: {m:+.3f}, {tau:.3f}, {math.exp(m) - 1:+.1%}" for th, (m, tau) in TRUE_EFFECTS.items()]
    return "\n".join(lines)


def main() -> None:
    tests = build_archive()
    write_archive(tests, RECORDS)
    print(summary(tests))
    print(f"wrote {len(tests)} records to {RECORDS}")


if __name__ == "__main__":
    main()
