// Reads a whole topic with the Apache Kafka Java client (the broker project's own consumer, the
// reference for isolation.level), from the beginning up to the end offsets as they are when it
// starts, and prints each record's value on its own line. Used by read-topic.ts to check what a
// read_committed consumer sees, independently of kafkajs.
//
// java -cp <dir of this class>:<kafka jars>/* ReadTopic <bootstrap> <topic> <read_committed|read_uncommitted>
import java.nio.charset.StandardCharsets;
import java.io.PrintStream;
import java.time.Duration;
import java.util.ArrayList;
import java.util.List;
import java.util.Map;
import java.util.Properties;
import org.apache.kafka.clients.consumer.ConsumerRecord;
import org.apache.kafka.clients.consumer.KafkaConsumer;
import org.apache.kafka.common.PartitionInfo;
import org.apache.kafka.common.TopicPartition;
import org.apache.kafka.common.serialization.StringDeserializer;

public class ReadTopic {
  public static void main(String[] args) {
    Properties p = new Properties();
    p.put("bootstrap.servers", args[0]);
    p.put("isolation.level", args[2]);
    p.put("enable.auto.commit", "false");
    p.put("key.deserializer", StringDeserializer.class.getName());
    p.put("value.deserializer", StringDeserializer.class.getName());
    PrintStream out = new PrintStream(System.out, false, StandardCharsets.UTF_8);
    try (KafkaConsumer<String, String> c = new KafkaConsumer<>(p)) {
      List<TopicPartition> parts = new ArrayList<>();
      for (PartitionInfo info : c.partitionsFor(args[1])) parts.add(new TopicPartition(args[1], info.partition()));
      c.assign(parts);
      c.seekToBeginning(parts);
      // With read_committed, the end offsets are the last stable offsets.
      Map<TopicPartition, Long> ends = c.endOffsets(parts);
      for (;;) {
        boolean done = true;
        for (TopicPartition tp : parts) if (c.position(tp) < ends.get(tp)) done = false;
        if (done) break;
        for (ConsumerRecord<String, String> r : c.poll(Duration.ofMillis(500))) out.println(r.value());
      }
    }
    out.flush();
  }
}
