/**
 * The test broker itself (test/helpers/nats-server.ts): Debian's nats-server with JetStream, driven
 * through the npm clients the site code uses. What JetStream acknowledged survives a kill and restart
 * (its file store; the NATS JetStream documentation's guarantee for file storage, from memory).
 */
import { connect } from '@nats-io/transport-node';
import { jetstream, jetstreamManager } from '@nats-io/jetstream';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { natsAvailable, startBroker, type TestBroker } from '../helpers/nats-server.ts';

describe.skipIf(!natsAvailable)('test broker (nats-server with JetStream)', () => {
  let broker: TestBroker;
  beforeAll(async () => {
    broker = await startBroker();
  }, 30_000);
  afterAll(async () => {
    await broker?.close();
  });

  it('keeps acknowledged JetStream messages across a kill and restart', async () => {
    let nc = await connect({ servers: broker.url });
    const jsm = await jetstreamManager(nc);
    await jsm.streams.add({ name: 'T', subjects: ['t.>'] });
    const js = jetstream(nc);
    for (let i = 0; i < 10; i++) await js.publish('t.x', JSON.stringify({ i }));
    await nc.close();
    await broker.kill();
    await broker.start();
    nc = await connect({ servers: broker.url });
    const info = await (await jetstreamManager(nc)).streams.info('T');
    expect(info.state.messages).toBe(10);
    await nc.close();
  }, 60_000);
});
