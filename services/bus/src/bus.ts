// The one seam between the engine and a transport: the same runner drives the in-process bus and
// Kafka, so a behaviour proven in memory is the behaviour on the broker.
export interface BusRecord {
  /** Logical topic name without prefix: see TOPICS in @keelson/shared-types. */
  topic: string;
  key: string | null;
  value: string;
  /** Source partition and offset where the transport has them (Kafka); origin for dead letters. */
  partition?: number;
  offset?: string;
  /** Transport timestamp in epoch ms (Kafka record timestamp; publish time in memory). */
  timestamp?: number;
}

export interface OutRecord {
  key: string | null;
  value: string;
}

export type BatchHandler = (batch: BusRecord[]) => Promise<void>;

export interface Bus {
  /** Resolves once the transport has acknowledged every record (Kafka: acks from the leader set). */
  publish(topic: string, records: OutRecord[]): Promise<void>;
  /** Delivers records in batches; the transport commits a batch only after the handler resolves. */
  subscribe(topics: string[], handler: BatchHandler): Promise<void>;
  close(): Promise<void>;
}
