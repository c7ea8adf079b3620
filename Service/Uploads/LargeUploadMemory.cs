using System.Runtime;

namespace Bitbudget.Service.Uploads;

/// <summary>
/// Hands the memory of a large model upload back to the operating system once it is checked. Measured with
/// scripts/measure-upload-memory.sh: a refused 500 MiB model left the process at about 1.1 GB resident
/// (the bytes, the parsed protobuf and the runtime's copy stay on the large-object heap until a full
/// collection that may not come for a long time); a compacting, aggressive collection returns it.
/// </summary>
internal static class LargeUploadMemory
{
    /// <summary>Uploads smaller than this leave too little behind to be worth a blocking full collection.</summary>
    public const long ThresholdBytes = 64L << 20;

    public static void Release(long uploadBytes)
    {
        if (uploadBytes < ThresholdBytes)
        {
            return;
        }

        GCSettings.LargeObjectHeapCompactionMode = GCLargeObjectHeapCompactionMode.CompactOnce;
        GC.Collect(GC.MaxGeneration, GCCollectionMode.Aggressive, blocking: true, compacting: true);
    }
}
