/** Reads every tag's state for the overview: a handful of queries per tag, judged by @trueshift/report. */

import { resolveTagSettings } from '@trueshift/analyser';
import type { ResolvedTagSettings } from '@trueshift/analyser';
import { overviewRows } from '@trueshift/report';
import type { OverviewEvidenceIn, OverviewRow, OverviewTagIn } from '@trueshift/report';
import type { AlertRecord, MarkRecord, Store } from '@trueshift/store';

/** Uncleared alerts read at most; far more than anyone can act on at once. */
const ALERT_LIMIT = 1000;

export async function loadOverview(
  store: Store,
  defaults: Partial<ResolvedTagSettings>,
): Promise<OverviewRow[]> {
  const [tags, marks, open, acknowledged] = await Promise.all([
    store.listTags(),
    store.listMarks({ includeWithdrawn: false }),
    store.listAlerts({ state: 'open', limit: ALERT_LIMIT }),
    store.listAlerts({ state: 'acknowledged', limit: ALERT_LIMIT }),
  ]);
  // Only each tag's newest live mark decides its state, so only its evidence is read.
  const newest = new Map<string, MarkRecord>();
  for (const mark of marks) {
    for (const tag of mark.tags) {
      const seen = newest.get(tag);
      if (seen === undefined || mark.at > seen.at) newest.set(tag, mark);
    }
  }
  const rows: OverviewTagIn[] = [];
  const evidence: OverviewEvidenceIn[] = [];
  await Promise.all(
    tags.map(async (tag) => {
      const mark = newest.get(tag.name);
      const [last, latest] = await Promise.all([
        store.readSamples(tag.name, { limit: 1 }),
        mark === undefined ? null : store.latestEvidence(mark.id, tag.name),
      ]);
      const t = last.t[0];
      const v = last.value[0];
      rows.push({
        name: tag.name,
        unit: tag.unit,
        description: tag.description,
        riskLevel: resolveTagSettings(tag.settings, defaults).riskLevel,
        lastSample:
          t === undefined ? null : { t, value: v === undefined || Number.isNaN(v) ? null : v },
      });
      if (latest !== null) {
        evidence.push({
          markId: latest.markId,
          tag: latest.tag,
          verdict: latest.verdict,
          risk: latest.risk,
          nAfter: latest.nAfter,
        });
      }
    }),
  );
  const alerts: AlertRecord[] = [...open, ...acknowledged];
  return overviewRows({ tags: rows, marks, alerts, evidence });
}
