using Bitbudget.Search;
using Bitbudget.Service.Store;
using Microsoft.Data.Sqlite;

namespace Bitbudget.Service.Tests.Store;

/// <summary>Which errors are the disk's (SQLite result codes from sqlite.org/rescode.html; errno values from Linux errno.h).</summary>
public sealed class StorageFaultTests
{
    [Theory]
    [InlineData(8)]   // SQLITE_READONLY
    [InlineData(10)]  // SQLITE_IOERR
    [InlineData(13)]  // SQLITE_FULL
    [InlineData(14)]  // SQLITE_CANTOPEN
    public void SqliteDiskCodesAreStorageFaults(int code) =>
        Assert.True(StorageFault.Is(new SqliteException("disk", code)));

    [Theory]
    [InlineData(19)]  // SQLITE_CONSTRAINT: a bug or a race, not the disk
    [InlineData(1)]   // SQLITE_ERROR: bad SQL
    public void OtherSqliteCodesAreNot(int code) =>
        Assert.False(StorageFault.Is(new SqliteException("not the disk", code)));

    [Fact]
    public void AFullDiskErrnoIsAStorageFaultEvenWrapped()
    {
        var enospc = new IOException("No space left on device", 28);
        Assert.True(StorageFault.Is(enospc));
        Assert.True(StorageFault.Is(new InvalidOperationException("while saving", enospc)));
        Assert.True(StorageFault.Is(new InvalidOperationException("while saving", new SqliteException("full", 13))));
    }

    [Fact]
    public void AParserIOExceptionInsideARefusalIsNot()
    {
        // Protobuf's InvalidProtocolBufferException derives from IOException; a truncated upload is the client's fault.
        var refusal = new EngineException("model-not-onnx", "The file is not a readable ONNX model.", new IOException("truncated"));
        Assert.False(StorageFault.Is(refusal));
        Assert.False(StorageFault.Is(new IOException("truncated message")));
        Assert.False(StorageFault.Is(new EndOfStreamException()));
    }
}
